"""atomic_output() and write_still(): all-or-nothing outputs, --force, full disks, lossless stills.

References: PNG (RFC 2083 §4.1.1 / ISO/IEC 15948): the IHDR chunk's bit-depth byte
(file offset 24) is 16 for 16-bit samples and the colour-type byte (offset 25) is 2
for truecolour.  ENOSPC is "No space left on device" (POSIX errno).
"""

from __future__ import annotations

import errno
import json
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import cv2
import numpy as np
import pytest

from livecurve.errors import OutputError
from livecurve.media import atomic_output, write_still
from tests.conftest import require

REPO = Path(__file__).resolve().parents[2]


def _names(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_success_renames_and_leaves_no_temp(tmp_path):
    with atomic_output(tmp_path / "out.txt") as tmp:
        assert tmp.parent == tmp_path and tmp.name.startswith(".") and tmp.suffix == ".txt"
        tmp.write_text("hello")
    assert _names(tmp_path) == ["out.txt"]
    assert (tmp_path / "out.txt").read_text() == "hello"


def test_existing_output_is_refused_without_force(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(OutputError, match="out.txt: exists; use --force"):
        with atomic_output(target) as tmp:
            tmp.write_text("new")
    assert target.read_text() == "old" and _names(tmp_path) == ["out.txt"]
    with atomic_output(target, force=True) as tmp:
        tmp.write_text("new")
    assert target.read_text() == "new" and _names(tmp_path) == ["out.txt"]


def test_exception_inside_leaves_nothing(tmp_path):
    with pytest.raises(OutputError, match="out.txt: no output was written: ValueError: boom"):
        with atomic_output(tmp_path / "out.txt") as tmp:
            tmp.write_text("half")
            raise ValueError("boom")
    assert _names(tmp_path) == []


def test_keyboard_interrupt_leaves_nothing(tmp_path):
    with pytest.raises(OutputError, match="interrupted; no output was written") as info:
        with atomic_output(tmp_path / "out.txt") as tmp:
            tmp.write_text("half")
            raise KeyboardInterrupt
    assert isinstance(info.value.__cause__, KeyboardInterrupt)
    assert _names(tmp_path) == []


def test_empty_result_is_not_published(tmp_path):
    with pytest.raises(OutputError, match="produced no data"):
        with atomic_output(tmp_path / "out.txt"):
            pass
    assert _names(tmp_path) == []


def test_missing_folder_and_folder_target(tmp_path):
    with pytest.raises(OutputError, match="does not exist"):
        with atomic_output(tmp_path / "no" / "out.txt"):
            pass
    with pytest.raises(OutputError, match="is a folder"):
        with atomic_output(tmp_path):
            pass


def test_disk_full_is_named(tmp_path):
    # the translation of ENOSPC raised by a writer inside the block
    with pytest.raises(OutputError, match="disk full"):
        with atomic_output(tmp_path / "out.bin") as tmp:
            tmp.write_bytes(b"x")
            raise OSError(errno.ENOSPC, "No space left on device")
    assert _names(tmp_path) == []


_FULL_DISK_SCRIPT = textwrap.dedent("""
    import json, os, sys
    import numpy as np
    from livecurve.errors import OutputError
    from livecurve.media import ClipWriter, write_still
    d = sys.argv[1]
    rng = np.random.default_rng(0)
    out = {}
    try:
        write_still(os.path.join(d, "big.png"),
                    rng.integers(0, 65536, (400, 400, 3), dtype=np.uint16))
        out["still"] = "written"
    except OutputError as e:
        out["still"] = str(e)
    try:
        with ClipWriter(os.path.join(d, "big.mkv"), width=320, height=240, fps=25,
                        codec="ffv1") as w:
            for _ in range(20):
                w.write(rng.integers(0, 256, (240, 320, 3), dtype=np.uint8))
        out["clip"] = "written"
    except OutputError as e:
        out["clip"] = str(e)
    out["left"] = sorted(os.listdir(d))
    print(json.dumps(out))
""")


def test_real_full_disk_on_a_small_tmpfs(tmp_path):
    # A 256 KiB tmpfs mounted in a private user+mount namespace (util-linux unshare):
    # both a 1 MB PNG and an incompressible FFV1 clip must fail with "disk full" and
    # leave the folder empty.
    unshare = shutil.which("unshare")
    probe = subprocess.run([unshare or "unshare", "-r", "-m", "true"], capture_output=True) \
        if unshare else None
    require(probe is not None and probe.returncode == 0,
            "user namespaces (unshare -r -m) to mount a small tmpfs")
    mnt = tmp_path / "small"
    mnt.mkdir()
    script = tmp_path / "fill.py"
    script.write_text(_FULL_DISK_SCRIPT)
    res = subprocess.run(
        [unshare, "-r", "-m", "sh", "-c",
         'mount -t tmpfs -o size=256k none "$1" && exec "$2" "$3" "$1"', "sh",
         str(mnt), sys.executable, str(script)],
        capture_output=True, text=True, timeout=120, cwd=REPO)
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout.strip().splitlines()[-1])
    assert "big.png: disk full" in out["still"]
    assert "big.mkv: disk full" in out["clip"]
    assert out["left"] == []


# --------------------------------------------------------------------------- stills
def test_16_bit_png_round_trip_is_exact(tmp_path):
    img = np.random.default_rng(11).integers(0, 65536, (37, 53, 3), dtype=np.uint16)
    p = write_still(tmp_path / "deep.png", img)
    head = p.read_bytes()[:26]
    assert head[:8] == b"\x89PNG\r\n\x1a\n" and head[12:16] == b"IHDR"
    assert head[24] == 16 and head[25] == 2  # 16-bit truecolour (RFC 2083 §4.1.1)
    back = cv2.imread(str(p), cv2.IMREAD_UNCHANGED)[:, :, ::-1]
    np.testing.assert_array_equal(back, img)
    assert _names(tmp_path) == ["deep.png"]


@pytest.mark.parametrize("dtype, ext", [(np.uint8, ".tif"), (np.uint16, ".tiff"),
                                        (np.uint8, ".png")])
def test_other_lossless_round_trips(tmp_path, dtype, ext):
    top = np.iinfo(dtype).max + 1
    img = np.random.default_rng(5).integers(0, top, (19, 23, 3), dtype=dtype)
    p = write_still(tmp_path / f"x{ext}", img)
    back = cv2.imread(str(p), cv2.IMREAD_UNCHANGED)
    assert back.dtype == dtype
    np.testing.assert_array_equal(back[:, :, ::-1], img)


def test_still_refuses_existing_and_bad_input(tmp_path):
    img = np.zeros((4, 4, 3), np.uint8)
    write_still(tmp_path / "a.png", img)
    with pytest.raises(OutputError, match="a.png: exists; use --force"):
        write_still(tmp_path / "a.png", img)
    write_still(tmp_path / "a.png", img + 1, force=True)
    assert cv2.imread(str(tmp_path / "a.png"))[0, 0, 0] == 1
    with pytest.raises(OutputError, match=r"\.png, \.tif, \.tiff"):
        write_still(tmp_path / "a.jpg", img)
    with pytest.raises(OutputError, match="float32"):
        write_still(tmp_path / "b.png", img.astype(np.float32))
    with pytest.raises(OutputError, match=r"shape \(4, 4, 4\)"):
        write_still(tmp_path / "c.png", np.zeros((4, 4, 4), np.uint8))
    assert _names(tmp_path) == ["a.png"]
