"""ClipWriter: frame count, size, rate, colour coding, lossless round trip, audio copy,
all-or-nothing behaviour.

References: the bundled ffmpeg reads the results back (its md5 muxer hashes audio
packets; its raw yuv420p output shows the stored Y′CbCr codes); the 75 % bar codes
for BT.709 8-bit limited range are those in /work/shared/REFERENCES.md, cross-checked
here with colour-science (``colour.RGB_to_YCbCr``).
"""

from __future__ import annotations

import warnings
from fractions import Fraction

import numpy as np
import pytest

from livecurve.errors import MediaError, OutputError
from livecurve.media import ClipWriter, open_source, probe
from tests.media.conftest import ffmpeg

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # colour-science lists optional packages on import
    import colour

# R′G′B′ 75 % bars (0.75 × 255 → 191) and their BT.709 8-bit Y′/Cb/Cr (REFERENCES.md)
BARS_RGB = np.array([[191, 191, 191], [191, 191, 0], [0, 191, 191], [0, 191, 0],
                     [191, 0, 191], [191, 0, 0], [0, 0, 191]], np.uint8)
BARS_709_8BIT = np.array([[180, 128, 128], [168, 44, 136], [145, 147, 44], [133, 63, 52],
                          [63, 193, 204], [51, 109, 212], [28, 212, 120]])
PATCH = 32


def _bars(height: int = 64) -> np.ndarray:
    img = np.empty((height, PATCH * 7, 3), np.uint8)
    for i, c in enumerate(BARS_RGB):
        img[:, i * PATCH:(i + 1) * PATCH] = c
    return img


def _names(folder):
    return sorted(p.name for p in folder.iterdir())


def _count_decoded(path) -> int:
    with open_source(path) as src:
        return sum(1 for _ in src)


def test_reference_codes_agree_with_colour_science():
    # the table in REFERENCES.md is what BT.709 gives for 75 % bars
    rgb = (BARS_RGB > 0) * 0.75  # 75 % amplitude, 0 % setup
    got = colour.RGB_to_YCbCr(rgb, K=colour.WEIGHTS_YCBCR["ITU-R BT.709"], out_bits=8,
                              out_legal=True, out_int=True)
    np.testing.assert_array_equal(got, BARS_709_8BIT)


def test_h264_frames_size_rate(tmp_path):
    out = tmp_path / "o.mp4"
    with ClipWriter(out, width=224, height=64, fps=30, codec="h264") as w:
        for _ in range(17):
            w.write(_bars())
    assert w.frames_written == 17
    info = probe(out)
    assert (info.width, info.height, info.fps, info.n_frames) == (224, 64, 30.0, 17)
    assert (info.colour_matrix, info.colour_range, info.codec) == ("bt709", "tv", "h264")
    assert _count_decoded(out) == 17
    assert _names(tmp_path) == ["o.mp4"]


def test_h264_stores_bt709_bar_codes(tmp_path):
    out = tmp_path / "bars.mp4"
    with ClipWriter(out, width=224, height=64, fps=25) as w:
        for _ in range(3):
            w.write(_bars())
    raw = np.frombuffer(ffmpeg("-i", str(out), "-frames:v", "1", "-f", "rawvideo",
                               "-pix_fmt", "yuv420p", "-"), np.uint8)
    h, wd = 64, 224
    y = raw[:h * wd].reshape(h, wd)
    cb = raw[h * wd:h * wd + h * wd // 4].reshape(h // 2, wd // 2)
    cr = raw[h * wd + h * wd // 4:].reshape(h // 2, wd // 2)
    got = np.array([[y[32, i * PATCH + 16], cb[16, i * PATCH // 2 + 8],
                     cr[16, i * PATCH // 2 + 8]] for i in range(7)], np.int64)
    # crf 18 on flat patches: allow one code for the lossy coder
    assert np.max(np.abs(got - BARS_709_8BIT)) <= 1, got


def test_full_hd_keeps_1080_lines(tmp_path):
    # no padding to a multiple of 16 lines (1088)
    out = tmp_path / "hd.mp4"
    frame = np.zeros((1080, 1920, 3), np.uint8)
    with ClipWriter(out, width=1920, height=1080, fps=Fraction(30000, 1001)) as w:
        w.write(frame)
        w.write(frame)
    info = probe(out)
    assert (info.width, info.height, info.n_frames) == (1920, 1080, 2)
    assert info.fps_fraction == Fraction(30000, 1001)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16])
def test_ffv1_round_trip_is_exact(tmp_path, dtype):
    rng = np.random.default_rng(2)
    top = np.iinfo(dtype).max + 1
    frames = [rng.integers(0, top, (61, 83, 3), dtype=dtype) for _ in range(4)]  # odd size
    out = tmp_path / "x.mkv"
    with ClipWriter(out, width=83, height=61, fps=24, codec="ffv1") as w:
        for f in frames:
            w.write(f)
    info = probe(out)
    assert info.source_bits == (8 if dtype == np.uint8 else 16) and info.n_frames == 4
    with open_source(out) as src:
        back = [f.rgb for f in src]
    assert len(back) == 4
    for a, b in zip(frames, back, strict=True):
        assert b.dtype == dtype
        np.testing.assert_array_equal(a, b)


def _audio_md5(path) -> bytes:
    return ffmpeg("-i", str(path), "-map", "0:a", "-c", "copy", "-f", "md5", "-")


def _packet_hashes(path) -> list[str]:
    text = ffmpeg("-i", str(path), "-map", "0:a", "-c", "copy", "-f", "framemd5", "-").decode()
    # framemd5 lines: stream, dts, pts, duration, size, hash[, side data]
    return [line.split(",")[5].strip() for line in text.splitlines()
            if line and not line.startswith("#")]


@pytest.mark.parametrize("codec, ext", [("h264", ".mp4"), ("ffv1", ".mkv")])
def test_audio_is_carried_bit_identical(clip_dir, tmp_path, codec, ext):
    src = clip_dir / "tone.mp4"
    out = tmp_path / f"with_audio{ext}"
    with ClipWriter(out, width=160, height=120, fps=25, codec=codec, audio_from=src) as w:
        with open_source(src) as frames:
            for f in frames:
                w.write(f.rgb)
    info = probe(out)
    assert info.has_audio and info.audio_rate == 48000 and info.n_frames == 50
    assert _audio_md5(out) == _audio_md5(src)


def test_audio_span_is_a_run_of_source_packets(clip_dir, tmp_path):
    src = clip_dir / "noise_only.m4a"  # noise: no two packets alike
    out = tmp_path / "span.mp4"
    with ClipWriter(out, width=64, height=64, fps=25, audio_from=src, audio_start_s=1.0,
                    audio_duration_s=1.0) as w:
        for _ in range(25):
            w.write(np.zeros((64, 64, 3), np.uint8))
    whole, part = _packet_hashes(src), _packet_hashes(out)
    # 1 s of 48 kHz AAC is 46.9 packets of 1024 samples; copying cuts on packet edges
    assert 45 <= len(part) <= 50
    assert len(set(whole)) == len(whole)
    start = whole.index(part[0])
    assert 45 <= start <= 48  # the packet holding t = 1.0 s (sample 48000) or one before
    assert whole[start:start + len(part)] == part


def test_audio_source_without_audio(clip_dir, tmp_path):
    with pytest.raises(MediaError, match="rgb16.mkv: has no audio stream"):
        ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25,
                   audio_from=clip_dir / "rgb16.mkv")
    with pytest.raises(MediaError, match="past its end"):
        ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25,
                   audio_from=clip_dir / "tone.mp4", audio_start_s=5.0)


# --------------------------------------------------------------------------- failures
@pytest.mark.parametrize("stop", [ValueError("processing failed"), KeyboardInterrupt()])
def test_interrupted_write_leaves_nothing(tmp_path, stop):
    out = tmp_path / "half.mp4"
    with pytest.raises(OutputError, match="no output was written"):
        with ClipWriter(out, width=64, height=64, fps=25) as w:
            for i in range(10):
                if i == 5:
                    raise stop
                w.write(np.full((64, 64, 3), 20 * i, np.uint8))
    assert _names(tmp_path) == []


def test_existing_output_refused_without_force(tmp_path):
    out = tmp_path / "o.mp4"
    out.write_bytes(b"keep me")
    with pytest.raises(OutputError, match="o.mp4: exists; use --force"):
        with ClipWriter(out, width=64, height=64, fps=25) as w:
            w.write(np.zeros((64, 64, 3), np.uint8))
    assert out.read_bytes() == b"keep me"
    with ClipWriter(out, width=64, height=64, fps=25, force=True) as w:
        w.write(np.zeros((64, 64, 3), np.uint8))
    assert probe(out).n_frames == 1 and _names(tmp_path) == ["o.mp4"]


def test_ffmpeg_failure_shows_its_words(tmp_path):
    with pytest.raises(OutputError, match="ffmpeg said: .*preset") as info:
        with ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25,
                        preset="not-a-preset") as w:
            for _ in range(3):
                w.write(np.zeros((64, 64, 3), np.uint8))
    assert "no output was written" in str(info.value)
    assert _names(tmp_path) == []


def test_no_frames_no_file(tmp_path):
    with pytest.raises(OutputError, match="no frames were written"):
        with ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25):
            pass
    assert _names(tmp_path) == []


@pytest.mark.parametrize("kw, match", [
    ({"width": 65}, "even width and height"),
    ({"codec": "prores"}, "codec 'prores'"),
    ({"fps": 0}, "frame rate 0"),
    ({"matrix": "srgb"}, "matrix 'srgb'"),
    ({"crf": 60}, "crf 60"),
])
def test_bad_settings(tmp_path, kw, match):
    args = {"width": 64, "height": 64, "fps": 25} | kw
    with pytest.raises(OutputError, match=match):
        ClipWriter(tmp_path / "o.mp4", **args)


def test_wrong_container_and_frames(tmp_path):
    with pytest.raises(OutputError, match=r"ffv1 is written to \.mkv"):
        ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25, codec="ffv1")
    with pytest.raises(OutputError, match=r"frame 1 has shape \(64, 32, 3\)"):
        with ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25) as w:
            w.write(np.zeros((64, 64, 3), np.uint8))
            w.write(np.zeros((64, 32, 3), np.uint8))
    with pytest.raises(OutputError, match="is uint16 but the clip started as uint8"):
        with ClipWriter(tmp_path / "o.mp4", width=64, height=64, fps=25) as w:
            w.write(np.zeros((64, 64, 3), np.uint8))
            w.write(np.zeros((64, 64, 3), np.uint16))
    assert _names(tmp_path) == []
