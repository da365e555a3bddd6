"""probe(): size, rate, frame count, audio, colour tags, bit depth; damaged input.

References: the parameters given to ffmpeg's lavfi generators when the clips were
made (tests/media/conftest.py); frame counts are cross-checked by decoding every
frame; colour tags follow ITU-T H.273 code points as ffmpeg names them.
"""

from __future__ import annotations

import os
import re
from fractions import Fraction

import cv2
import numpy as np
import pytest

from livecurve.errors import LivecurveError, MediaError
from livecurve.media import open_source, probe
from tests.media.conftest import DEMO, ffmpeg, make_clip


def _raises_naming(path, *, match: str = ""):
    """MediaError whose message names *path* (and matches *match*)."""
    return pytest.raises(MediaError, match=re.escape(str(path)) + ".*" + match)


# --------------------------------------------------------------------------- good clips
def test_demo_clip_facts():
    # reference: the demo's own specification (clips/make_demo_clip.py docstring)
    info = probe(DEMO)
    assert (info.kind, info.width, info.height) == ("clip", 1280, 720)
    assert info.fps == 30.0 and info.n_frames == 180 and info.n_frames_exact
    assert info.duration_s == pytest.approx(6.0)
    assert info.has_audio and info.audio_rate == 48000
    assert info.colour_matrix == "bt709" and info.colour_range == "tv"
    assert info.source_bits == 8 and info.codec == "h264"


@pytest.mark.parametrize("name, w, h, fps, n, audio, matrix, bits", [
    # made with testsrc2 size/rate/duration and sine sample_rate as listed in conftest
    ("tone.mp4", 160, 120, 25.0, 50, 48000, None, 8),
    ("ntsc.mp4", 160, 120, 30000 / 1001, 60, None, None, 8),
    ("ten_bit_2020.mkv", 160, 120, 25.0, 25, None, "bt2020", 10),
    ("rgb16.mkv", 160, 120, 25.0, 25, None, None, 16),
    ("pal.mp4", 176, 144, 25.0, 25, None, "bt601", 8),
    ("cd_audio.mkv", 160, 120, 25.0, 25, 44100, None, 8),
])
def test_synthetic_clip_facts(clip_dir, name, w, h, fps, n, audio, matrix, bits):
    info = probe(clip_dir / name)
    assert (info.width, info.height) == (w, h)
    assert info.fps == pytest.approx(fps, rel=1e-12)
    assert info.n_frames == n and info.n_frames_exact
    assert info.duration_s == pytest.approx(n / fps)
    assert info.has_audio == (audio is not None)
    assert info.audio_rate == audio
    assert info.colour_matrix == matrix
    assert info.source_bits == bits


def test_ntsc_rate_is_exact(clip_dir):
    # 30000/1001 Hz: the NTSC-derived rate of SMPTE ST 274 / ST 296
    assert probe(clip_dir / "ntsc.mp4").fps_fraction == Fraction(30000, 1001)


@pytest.mark.parametrize("name", ["tone.mp4", "ntsc.mp4", "ten_bit_2020.mkv", "rgb16.mkv"])
def test_count_agrees_with_decoding(clip_dir, name):
    # invariant: the packet count equals the number of frames the decoder delivers
    info = probe(clip_dir / name)
    with open_source(clip_dir / name) as src:
        frames = list(src)
    assert len(frames) == info.n_frames
    assert [f.index for f in frames] == list(range(info.n_frames))
    dtype = np.uint8 if info.source_bits <= 8 else np.uint16
    assert all(f.rgb.dtype == dtype and f.rgb.shape == (info.height, info.width, 3)
               for f in frames)


def test_estimate_is_flagged(clip_dir):
    info = probe(clip_dir / "tone.mp4", count_frames=False)
    assert not info.n_frames_exact
    assert info.n_frames == 50  # 2.00 s × 25 Hz from the container's duration


# --------------------------------------------------------------------------- stills and sequences
def test_still_16_bit(tmp_path):
    img = np.random.default_rng(1).integers(0, 65536, (30, 40, 3), dtype=np.uint16)
    cv2.imwrite(str(tmp_path / "a.png"), img)
    info = probe(tmp_path / "a.png", sequence_fps=24)
    assert (info.kind, info.width, info.height, info.source_bits) == ("still", 40, 30, 16)
    assert info.n_frames == 1 and info.fps == 24.0


def _write_sequence(folder, numbers, *, name="shot_{:d}.png", shape=(8, 12, 3)):
    folder.mkdir(exist_ok=True)
    for k in numbers:
        img = np.full(shape, k, np.uint8)
        cv2.imwrite(str(folder / name.format(k)), img)


def test_printf_sequence_in_numeric_order(tmp_path):
    _write_sequence(tmp_path / "s", range(1, 13), name="shot_{:04d}.png")
    info = probe(tmp_path / "s" / "shot_%04d.png")
    assert info.kind == "sequence" and info.n_frames == 12 and info.fps == 30.0
    assert [os.path.basename(f) for f in info.files][:3] == ["shot_0001.png", "shot_0002.png",
                                                             "shot_0003.png"]


def test_glob_sequence_sorts_numbers_naturally(tmp_path):
    # shot_10 must come after shot_9, not after shot_1
    _write_sequence(tmp_path / "s", range(1, 13))
    info = probe(str(tmp_path / "s" / "*.png"))
    with open_source(str(tmp_path / "s" / "*.png")) as src:
        levels = [int(f.rgb[0, 0, 0]) for f in src]
    assert levels == list(range(1, 13))
    assert info.n_frames == 12


def test_sequence_gap_is_reported(tmp_path):
    _write_sequence(tmp_path / "s", [1, 2, 4], name="f_{:03d}.png")
    with _raises_naming(tmp_path / "s" / "f_%03d.png", match="missing f_003.png"):
        probe(tmp_path / "s" / "f_%03d.png")


def test_sequence_size_change_names_the_file(tmp_path):
    _write_sequence(tmp_path / "s", [1, 2], name="f_{:d}.png")
    cv2.imwrite(str(tmp_path / "s" / "f_3.png"), np.zeros((9, 12, 3), np.uint8))
    with open_source(tmp_path / "s" / "f_%d.png") as src, \
            _raises_naming(tmp_path / "s" / "f_3.png", match="12x9"):
        list(src)


def test_pattern_without_files_and_folder(tmp_path):
    with _raises_naming(tmp_path / "none_%04d.png", match="no files match"):
        probe(tmp_path / "none_%04d.png")
    with _raises_naming(tmp_path, match="is a folder"):
        probe(tmp_path)


# --------------------------------------------------------------------------- damaged input
def test_missing_file(tmp_path):
    with _raises_naming(tmp_path / "nope.mp4", match="no such file"):
        probe(tmp_path / "nope.mp4")


def test_empty_file(tmp_path):
    (tmp_path / "e.mp4").write_bytes(b"")
    with _raises_naming(tmp_path / "e.mp4", match="empty"):
        probe(tmp_path / "e.mp4")


def test_random_bytes_named_mp4(tmp_path):
    p = tmp_path / "noise.mp4"
    p.write_bytes(np.random.default_rng(7).integers(0, 256, 60_000, dtype=np.uint8).tobytes())
    with _raises_naming(p, match="cannot be read"):
        probe(p)


def _halve(src, dst):
    data = src.read_bytes()
    dst.write_bytes(data[: len(data) // 2])
    return dst


@pytest.mark.parametrize("name, faststart", [("idx_end.mp4", False), ("idx_front.mp4", True),
                                             ("cut.mkv", False)])
def test_clip_cut_to_half_its_bytes(tmp_path, name, faststart):
    # MP4 keeps its index ('moov' box, ISO/IEC 14496-12) at the end unless moved to the
    # front; Matroska records each stream's duration.  All three must be caught.
    extra = ("-movflags", "+faststart") if faststart else ()
    full = make_clip(tmp_path / ("full" + os.path.splitext(name)[1]), seconds=2.0,
                     audio_hz=48000, extra=extra)
    assert probe(full).n_frames == 50
    cut = _halve(full, tmp_path / name)
    with _raises_naming(cut, match="(truncated|index is missing)"):
        probe(cut)


def test_zero_frame_y4m(tmp_path):
    # a YUV4MPEG2 stream header with no FRAME records: a video stream holding no pictures
    p = tmp_path / "zero.y4m"
    p.write_bytes(b"YUV4MPEG2 W160 H120 F25:1 Ip A1:1 C420jpeg\n")
    with _raises_naming(p, match="no video frames"):
        probe(p)


def test_zero_frame_encode_leaves_no_video_stream(tmp_path):
    p = tmp_path / "zero.mp4"
    ffmpeg("-y", "-f", "lavfi", "-i", "testsrc2=size=64x64:rate=25", "-frames:v", "0",
           "-c:v", "libx264", str(p))
    with _raises_naming(p, match="no video stream"):
        probe(p)


def test_audio_only_file(clip_dir):
    with _raises_naming(clip_dir / "tone_only.m4a", match="no video stream"):
        probe(clip_dir / "tone_only.m4a")


def test_unreadable_image(tmp_path):
    p = tmp_path / "bad.png"
    p.write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 40)
    with _raises_naming(p, match="cannot be decoded"):
        probe(p)


def test_media_error_is_a_livecurve_error():
    assert issubclass(MediaError, LivecurveError)
