"""Shared inputs of the preview tests: a small chain, a still of flat bars, a short clip.

No tests live here; the preview test modules import these helpers.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np

from livecurve.media.atomic import write_still
from livecurve.preview.overlay import PIC_H, PIC_W, picture_scale

REPO = Path(__file__).resolve().parents[2]

#: Bars of the test still, left to right: R′G′B′ code values (8-bit, full range).
BARS = ((0, 0, 0), (64, 64, 64), (128, 128, 128), (192, 192, 192), (255, 255, 255),
        (255, 0, 0))
BAR_W, STILL_H = 55, 180


def chain_text(r_f: str = "2k", *, title: str = "preview test") -> str:
    """A one-stage R′G′B′ chain: a non-inverting gain whose feedback resistor is live
    (100 Ω … 20 kΩ, a ratio of 200, so its slider is logarithmic)."""
    return f"""
title = "{title}"
space = "rgb"
standard = "bt709"

[converter]
bits = 10
range = "legal"

[[stage]]
id = "amp"
kind = "noninverting_gain"
r_g = "10k"
r_f = "{r_f}"

[live.gain_r]
target = "amp.r_f"
min = "100"
max = "20k"
"""


def write_chain(path: Path, r_f: str = "2k", **kw) -> Path:
    path.write_text(chain_text(r_f, **kw), encoding="utf-8")
    return path


def bars_rgb() -> np.ndarray:
    """(STILL_H, 6·BAR_W, 3) uint8 still of the flat bars in :data:`BARS`."""
    img = np.zeros((STILL_H, BAR_W * len(BARS), 3), np.uint8)
    for i, rgb in enumerate(BARS):
        img[:, i * BAR_W:(i + 1) * BAR_W] = rgb
    return img


def write_bars(path: Path) -> Path:
    write_still(path, bars_rgb(), force=True)
    return path


def bar_centres_in_canvas(height: int = STILL_H, width: int = BAR_W * len(BARS)):
    """(row, [columns]) of each bar's centre inside the composite's picture area."""
    k, _ = picture_scale(height, width)
    nh, nw = max(1, int(height * k)), max(1, int(width * k))
    y0, x0 = (PIC_H - nh) // 2, (PIC_W - nw) // 2
    cols = [x0 + int((i + 0.5) * BAR_W * k) for i in range(len(BARS))]
    return y0 + nh // 2, cols


def make_clip(path: Path, *, seconds: float = 2.0, fps: int = 25, size: str = "160x90") -> Path:
    """A short H.264 test-pattern clip made by the bundled ffmpeg (lavfi ``testsrc2``)."""
    import imageio_ffmpeg
    cmd = [imageio_ffmpeg.get_ffmpeg_exe(), "-v", "error", "-y", "-f", "lavfi", "-i",
           f"testsrc2=size={size}:rate={fps}", "-t", str(seconds), "-pix_fmt", "yuv420p",
           "-c:v", "libx264", "-preset", "ultrafast", str(path)]
    subprocess.run(cmd, check=True, timeout=60)
    return path


#: Runs run_preview in a child process the way the command line does: a LivecurveError
#: becomes its message on stderr and its exit code.
RUNNER = """
import json, sys
from livecurve.preview.window import run_preview
from livecurve.errors import LivecurveError
kw = json.loads(sys.argv[1])
try:
    sys.exit(run_preview(**kw))
except LivecurveError as exc:
    print(f"livecurve: {exc}", file=sys.stderr)
    sys.exit(exc.exit_code)
"""


def runner_cmd(**kw) -> list[str]:
    import json
    return [sys.executable, "-c", RUNNER, json.dumps(kw)]
