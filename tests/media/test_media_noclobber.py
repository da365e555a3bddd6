"""The no-clobber promise of all-or-nothing outputs (livecurve.media.atomic).

README and the atomic module promise that an output without ``--force`` never replaces
a name that appeared while we were writing: publishing must be an exclusive create of
the final name (POSIX ``link(2)`` fails with EEXIST when the new name exists; a plain
``rename(2)`` would silently replace it — POSIX.1-2017, link() and rename(), from
memory).  These tests make the name appear *inside* the writing block, so a publish by
plain rename fails them.
"""

from __future__ import annotations

import errno
import os

import pytest

from livecurve.errors import OutputError
from livecurve.media.atomic import atomic_output


def _leftovers(folder, keep):
    return sorted(p.name for p in folder.iterdir() if p.name != keep)


def test_name_appearing_while_writing_is_not_replaced(tmp_path):
    final = tmp_path / "clip.bin"
    with pytest.raises(OutputError, match="exists"):
        with atomic_output(final) as tmp:
            tmp.write_bytes(b"ours")
            final.write_bytes(b"theirs")  # someone else created the name meanwhile
    assert final.read_bytes() == b"theirs"
    assert _leftovers(tmp_path, "clip.bin") == []  # our temporary file is gone


def test_without_hard_links_a_late_name_is_still_kept(tmp_path, monkeypatch):
    """On a file system without hard links (link(2) fails with EPERM, e.g. some FAT or
    network mounts — common practice) the publish falls back to rename, but only after
    checking the name is still free."""
    def no_links(src, dst, *a, **k):
        raise OSError(errno.EPERM, "hard links not supported")

    monkeypatch.setattr(os, "link", no_links)
    final = tmp_path / "lut.clf"
    with pytest.raises(OutputError, match="exists"):
        with atomic_output(final) as tmp:
            tmp.write_bytes(b"ours")
            final.write_bytes(b"theirs")
    assert final.read_bytes() == b"theirs"
    assert _leftovers(tmp_path, "lut.clf") == []
    # ...and with the name still free the fallback publishes our data
    free = tmp_path / "other.clf"
    with atomic_output(free) as tmp:
        tmp.write_bytes(b"ours")
    assert free.read_bytes() == b"ours"


def test_force_replaces_a_name_that_appeared(tmp_path):
    final = tmp_path / "deck.cir"
    with atomic_output(final, force=True) as tmp:
        tmp.write_bytes(b"ours")
        final.write_bytes(b"theirs")
    assert final.read_bytes() == b"ours"
    assert _leftovers(tmp_path, "deck.cir") == []


def test_publish_without_interference_writes_once(tmp_path):
    final = tmp_path / "still.png"
    with atomic_output(final) as tmp:
        tmp.write_bytes(b"ours")
    assert final.read_bytes() == b"ours"
    assert _leftovers(tmp_path, "still.png") == []
