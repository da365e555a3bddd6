"""The hostile corpus, replayed: chain files (``chains/*.toml``), command lines
(``cli_cases.txt``) and media (a truncated clip, a zero-byte file, a missing file).

Every case ends in success or in one clear message with exit 2 (bad input) or 3 (output
not writable) — never a traceback — and leaves no file behind.  Each refused chain file
names itself, the key and the value as written.

References: the TOML 1.0.0 specification (toml.io) for what the files say; README's exit
statuses (0, 2 bad input, 3 output not written); temperatures −55…+150 °C, the range
small-signal silicon parts are specified over (common practice).
"""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest

from livecurve.cli import main
from tests.conftest import ROOT

HERE = Path(__file__).resolve().parent
CHAINS = sorted((HERE / "chains").glob("*.toml"))


def _header(path: Path) -> dict:
    head = {}
    for line in path.read_bytes().decode("utf-8", "replace").lstrip("\ufeff").splitlines():
        m = re.match(r"^# (expect|key|value): ?(.*)$", line)
        if m:
            head[m.group(1)] = m.group(2).strip()
    return head


def _run(argv, capsys) -> tuple[int, str]:
    """main() in this process: any exception other than argparse's SystemExit fails the test
    with its traceback, which is what the corpus exists to catch."""
    try:
        rc = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse: usage error, exit 2
        rc = exc.code
    err = capsys.readouterr().err
    return rc, err


@pytest.mark.parametrize("path", CHAINS, ids=[p.stem for p in CHAINS])
def test_chain_file(path, capsys):
    head = _header(path)
    assert head.get("expect") in ("accepted", "refused"), f"{path.name}: no '# expect:' line"
    rc, err = _run(["check", path], capsys)
    if head["expect"] == "accepted":
        assert rc == 0, err
        return
    assert rc == 2, err
    assert err.startswith("livecurve: ") and err.count("\n") == 1, err  # one line
    assert str(path) in err
    if head.get("key"):
        assert f"key '{head['key']}" in err or head["key"] in err, err
    if head.get("value"):
        assert head["value"] in err, err


def test_deeply_nested_arrays(tmp_path, capsys):
    # 10 000 nested arrays: the TOML reader recurses once per level
    p = tmp_path / "nested.toml"
    p.write_text('space = "rgb"\nx = ' + "[" * 10_000 + "]" * 10_000 + "\n")
    rc, err = _run(["check", p], capsys)
    assert rc == 2 and str(p) in err and "nested" in err, err


def test_huge_chain_file_is_refused_before_parsing(tmp_path, capsys):
    p = tmp_path / "big.toml"
    p.write_text("# " + "x" * (5 << 20) + "\n")
    rc, err = _run(["check", p], capsys)
    assert rc == 2 and "bytes" in err, err


@pytest.fixture(scope="module")
def media(tmp_path_factory):
    d = tmp_path_factory.mktemp("media")
    demo = ROOT / "clips" / "demo.mp4"
    (d / "corrupt.mp4").write_bytes(demo.read_bytes()[:4096])  # a clip cut short
    (d / "empty.mp4").write_bytes(b"")
    import cv2
    import numpy as np
    cv2.imwrite(str(d / "still.png"), np.full((16, 24, 3), 128, np.uint8))
    return {"clip": demo, "corrupt": d / "corrupt.mp4", "empty": d / "empty.mp4",
            "missing": d / "no_such_file.mp4", "still": d / "still.png"}


def _cases():
    out = []
    for line in (HERE / "cli_cases.txt").read_text().splitlines():
        if line.strip() and not line.startswith("#"):
            code, rest = line.split(None, 1)
            out.append((int(code), rest))
    return out


CASES = _cases()


@pytest.mark.parametrize("code, line", CASES, ids=[f"{i:02d}" for i in range(len(CASES))])
def test_command_line(tmp_path, media, capsys, code, line):
    fill = {k: str(v) for k, v in media.items()}
    fill.update(knee=str(ROOT / "configs" / "night_knee.toml"),
                shoulder=str(ROOT / "configs" / "film_shoulder.toml"), tmp=str(tmp_path))
    argv = shlex.split(line.format(**fill))
    still = media["still"].read_bytes()
    rc, err = _run(argv, capsys)
    assert rc == code, f"{line}\n{err}"
    assert "Traceback" not in err
    assert err.startswith(("livecurve: ", "usage: ")), err
    assert list(tmp_path.iterdir()) == []  # nothing written, no folder, no partial
    assert media["still"].read_bytes() == still
