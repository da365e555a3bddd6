"""The all-or-nothing helpers of ``media.atomic`` for folders, sources and stale partials.

References: POSIX ``rename(2)`` (atomic within one file system; a directory may replace an
empty one), ``link(2)`` (fails with EEXIST rather than replace), ``kill(pid, 0)`` (ESRCH
when no such process) and ``statvfs(3)`` (``f_bavail`` × ``f_frsize`` bytes free to an
unprivileged writer); exit status 128 + N for a run ended by signal N (common practice).
"""

from __future__ import annotations

import os
import signal
import subprocess
from pathlib import Path

import pytest

from livecurve.errors import OutputError, OutputInterrupted, Stopped
from livecurve.media import atomic
from livecurve.media.atomic import (
    atomic_folder,
    atomic_output,
    check_not_source,
    remove_stale_partials,
)

NAMES = ("a.csv", "b.json")


def _write_all(tmp: Path, names=NAMES):
    for n in names:
        (tmp / n).write_text(f"content of {n}")


def _reaped_pid() -> int:
    child = subprocess.Popen(["true"])
    child.wait()
    return child.pid


def test_new_folder_appears_whole(tmp_path):
    out = tmp_path / "res"
    with atomic_folder(out, NAMES) as tmp:
        assert tmp.parent == tmp_path and tmp.name.startswith(".res.partial-")
        assert not out.exists()  # nothing visible while the work runs
        _write_all(tmp)
    assert sorted(p.name for p in out.iterdir()) == list(NAMES)
    assert [p.name for p in tmp_path.iterdir()] == ["res"]


def test_missing_parents_are_made_and_removed_again_on_failure(tmp_path):
    out = tmp_path / "x" / "y" / "res"
    with pytest.raises(OutputError, match="no output was written: ValueError: half way"):
        with atomic_folder(out, NAMES) as tmp:
            (tmp / NAMES[0]).write_text("half")
            raise ValueError("half way")
    assert list(tmp_path.iterdir()) == []
    with atomic_folder(out, NAMES) as tmp:
        _write_all(tmp)
    assert sorted(p.name for p in out.iterdir()) == list(NAMES)


def test_clash_refused_untouched_then_forced(tmp_path):
    out = tmp_path / "res"
    out.mkdir()
    (out / "b.json").write_text("old")
    (out / "mine.txt").write_text("unrelated")
    with pytest.raises(OutputError, match="already holds b.json; use --force"):
        with atomic_folder(out, NAMES) as tmp:
            _write_all(tmp)
    assert (out / "b.json").read_text() == "old" and not (out / "a.csv").exists()
    with atomic_folder(out, NAMES, force=True) as tmp:
        _write_all(tmp)
    assert (out / "b.json").read_text() == "content of b.json"
    assert (out / "mine.txt").read_text() == "unrelated"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def test_a_file_not_produced_publishes_nothing(tmp_path):
    out = tmp_path / "res"
    with pytest.raises(OutputError, match="b.json was not produced"):
        with atomic_folder(out, NAMES) as tmp:
            _write_all(tmp, NAMES[:1])
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("exc, code", [(KeyboardInterrupt(), 130), (Stopped(signal.SIGTERM), 143),
                                       (Stopped(signal.SIGHUP), 129)])
def test_stop_signals_clean_up_with_exit_128_plus_n(tmp_path, exc, code):
    with pytest.raises(OutputInterrupted) as info:
        with atomic_folder(tmp_path / "res", NAMES) as tmp:
            _write_all(tmp)
            raise exc
    assert info.value.exit_code == code and "interrupted" in str(info.value)
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(OutputInterrupted) as info:
        with atomic_output(tmp_path / "one.txt") as tmp:
            tmp.write_text("half")
            raise exc
    assert info.value.exit_code == code
    assert list(tmp_path.iterdir()) == []


def test_hidden_enospc_is_named_disk_full(tmp_path, monkeypatch):
    # an image encoder that fails without passing ENOSPC on, on a file system with no room
    class Full:
        f_bavail, f_frsize = 3, 4096

    monkeypatch.setattr(atomic.os, "statvfs", lambda p: Full)
    with pytest.raises(OutputError, match="disk full"):
        with atomic_output(tmp_path / "plot.png") as tmp:
            tmp.write_bytes(b"x")
            raise RuntimeError("PNG encoder failed")
    with pytest.raises(OutputError, match="res: disk full"):
        with atomic_folder(tmp_path / "res", NAMES) as tmp:
            raise RuntimeError("PNG encoder failed")
    assert list(tmp_path.iterdir()) == []


def test_generic_failure_with_room_is_not_called_disk_full(tmp_path):
    with pytest.raises(OutputError) as info:
        with atomic_output(tmp_path / "plot.png") as tmp:
            tmp.write_bytes(b"x")
            raise RuntimeError("PNG encoder failed")
    assert "disk full" not in str(info.value) and "PNG encoder failed" in str(info.value)


@pytest.mark.parametrize("how", ["same", "spelling", "hardlink", "symlink"])
def test_source_is_never_the_output(tmp_path, how):
    src = tmp_path / "clip.mp4"
    src.write_bytes(b"data")
    (tmp_path / "d").mkdir()
    out = {"same": src, "spelling": tmp_path / "d" / ".." / "clip.mp4",
           "hardlink": tmp_path / "h.mp4", "symlink": tmp_path / "s.mp4"}[how]
    if how == "hardlink":
        os.link(src, out)
    if how == "symlink":
        os.symlink(src, out)
    with pytest.raises(OutputError, match="is the source"):
        check_not_source(src, out)


def test_other_outputs_pass_the_source_check(tmp_path):
    src = tmp_path / "clip.mp4"
    src.write_bytes(b"data")
    (tmp_path / "copy.mp4").write_bytes(b"data")
    check_not_source(src, tmp_path / "copy.mp4")  # same bytes, another file
    check_not_source(src, tmp_path / "new.mp4")  # does not exist yet
    check_not_source("camera:0", tmp_path / "new.mp4")


def test_stale_partials_only_of_this_output_and_dead_processes(tmp_path):
    dead = _reaped_pid()
    stale_file = tmp_path / f".out.partial-{dead}-0badc0de.csv"
    stale_dir = tmp_path / f".out.partial-{dead}-0badc0de"
    mine = tmp_path / f".out.partial-{os.getpid()}-12345678.csv"
    other = tmp_path / f".other.partial-{dead}-0badc0de.csv"
    ext = tmp_path / f".out.partial-{dead}-0badc0de.png"
    for p in (stale_file, mine, other, ext):
        p.write_text("x")
    stale_dir.mkdir()
    (stale_dir / "inner.csv").write_text("x")
    assert sorted(remove_stale_partials(tmp_path / "out.csv")) == [stale_file]
    assert sorted(remove_stale_partials(tmp_path / "out")) == [stale_dir]
    assert mine.exists() and other.exists() and ext.exists()
