"""Fixtures for the media tests: small clips made by the bundled ffmpeg's own generators.

The reference for what a clip holds is the set of parameters handed to ffmpeg's
``lavfi`` sources (``testsrc2``, ``sine``) when making it; the code under test must
find them again.  imageio-ffmpeg ships its binary inside the wheel, so no skip
guard is needed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from livecurve.media import _ffmpeg

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "clips" / "demo.mp4"


def ffmpeg(*args: str, input_bytes: bytes | None = None) -> bytes:
    """Run the bundled ffmpeg; fail the test with its message when it fails."""
    res = _ffmpeg.run(["-v", "error", *args], input_bytes=input_bytes, timeout_s=120)
    if res.returncode != 0:
        pytest.fail(f"ffmpeg {' '.join(args)} failed: {res.stderr.decode()[-800:]}")
    return res.stdout


def make_clip(path: Path, *, size: str = "160x120", rate: str = "25", seconds: float = 2.0,
              vcodec: str = "libx264", pix_fmt: str = "yuv420p", audio_hz: int | None = None,
              acodec: str = "aac", extra: tuple[str, ...] = ()) -> Path:
    """A test-pattern clip (``testsrc2``) with an optional 440 Hz tone (``sine``)."""
    args = ["-y", "-f", "lavfi", "-i", f"testsrc2=size={size}:rate={rate}:duration={seconds}"]
    if audio_hz:
        args += ["-f", "lavfi", "-i", f"sine=frequency=440:sample_rate={audio_hz}:"
                 f"duration={seconds}", "-c:a", acodec]
    args += ["-c:v", vcodec, "-pix_fmt", pix_fmt, *extra, str(path)]
    ffmpeg(*args)
    return path


def raw_frames_clip(path: Path, planes: np.ndarray, *, pix_fmt: str, n: int = 2, rate: int = 25,
                    extra: tuple[str, ...] = ()) -> Path:
    """A lossless FFV1 clip whose stored samples are exactly *planes* (planar, (3, H, W))."""
    _, h, w = planes.shape
    data = np.ascontiguousarray(planes).astype("<u2" if planes.dtype == np.uint16 else np.uint8)
    ffmpeg("-y", "-f", "rawvideo", "-pix_fmt", pix_fmt, "-s", f"{w}x{h}", "-r", str(rate),
           *extra, "-i", "pipe:0", "-c:v", "ffv1", str(path), input_bytes=data.tobytes() * n)
    return path


@pytest.fixture(scope="session")
def clip_dir(tmp_path_factory) -> Path:
    """Clips shared by several tests (made once per session)."""
    d = tmp_path_factory.mktemp("clips")
    make_clip(d / "tone.mp4", audio_hz=48000)
    make_clip(d / "ntsc.mp4", rate="30000/1001", extra=("-movflags", "+faststart"))
    make_clip(d / "ten_bit_2020.mkv", seconds=1.0, pix_fmt="yuv420p10le",
              extra=("-colorspace", "bt2020nc", "-color_primaries", "bt2020",
                     "-color_trc", "bt2020-10"))
    make_clip(d / "rgb16.mkv", seconds=1.0, vcodec="ffv1", pix_fmt="gbrp16le")
    make_clip(d / "pal.mp4", size="176x144", seconds=1.0,
              extra=("-colorspace", "bt470bg", "-color_primaries", "bt470bg",
                     "-color_trc", "gamma28"))
    make_clip(d / "cd_audio.mkv", seconds=1.0, vcodec="ffv1", pix_fmt="yuv422p",
              audio_hz=44100, acodec="pcm_s16le")
    ffmpeg("-y", "-f", "lavfi", "-i", "sine=frequency=220:sample_rate=48000:duration=3",
           "-c:a", "aac", str(d / "tone_only.m4a"))
    ffmpeg("-y", "-f", "lavfi", "-i", "anoisesrc=duration=3:color=pink:sample_rate=48000:"
           "amplitude=0.3:seed=42", "-c:a", "aac", str(d / "noise_only.m4a"))
    return d

