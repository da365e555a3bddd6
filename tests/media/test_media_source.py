"""open_source(): decoded R′G′B′ codes, windows, seeking, looping, short clips.

Colour reference: ITU-R BT.709 / BT.601 / BT.2020 Y′CbCr → R′G′B′ as computed by
colour-science (``colour.YCbCr_to_RGB``), fed with 75 % colour-bar codes whose
BT.709 8-bit values are listed in /work/shared/REFERENCES.md (computed from BT.709
at 75 % amplitude; SMPTE RP 219 defines HD bars).  The clips carrying those codes
are lossless FFV1 with 4:4:4 sampling, so the decoder sees exactly those samples.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest

from livecurve.errors import MediaError
from livecurve.media import TruncatedMediaWarning, open_source, probe, write_still
from livecurve.media.source import ClipSource
from tests.media.conftest import ffmpeg, raw_frames_clip

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # colour-science lists optional packages on import
    import colour

# 75 % bars, BT.709, 8-bit Y′/Cb/Cr: white, yellow, cyan, green, magenta, red, blue
# (REFERENCES.md "75 % colour bars")
BARS_709_8BIT = np.array([[180, 128, 128], [168, 44, 136], [145, 147, 44], [133, 63, 52],
                          [63, 193, 204], [51, 109, 212], [28, 212, 120]])
PATCH = 16
K = {"bt601": "ITU-R BT.601", "bt709": "ITU-R BT.709", "bt2020": "ITU-R BT.2020"}


def _bar_planes(codes: np.ndarray, *, height: int, dtype) -> np.ndarray:
    """Planar (3, H, 7·PATCH) picture of flat patches with the given Y′CbCr codes."""
    planes = np.empty((3, height, PATCH * len(codes)), dtype)
    for i, c in enumerate(codes):
        planes[:, :, i * PATCH:(i + 1) * PATCH] = np.asarray(c, dtype)[:, None, None]
    return planes


def _patch_centres(rgb: np.ndarray) -> np.ndarray:
    y = rgb.shape[0] // 2
    return np.array([rgb[y, i * PATCH + PATCH // 2] for i in range(rgb.shape[1] // PATCH)],
                    np.int64)


def _expected(codes, matrix, *, in_bits, out_bits):
    return colour.YCbCr_to_RGB(np.asarray(codes), K=colour.WEIGHTS_YCBCR[K[matrix]],
                               in_bits=in_bits, in_legal=True, in_int=True, out_bits=out_bits,
                               out_legal=False, out_int=True)


# --------------------------------------------------------------------------- colour
def test_bt709_bars_decode_to_colour_science_values(tmp_path):
    clip = raw_frames_clip(tmp_path / "bars.mkv", _bar_planes(BARS_709_8BIT, height=16,
                                                              dtype=np.uint8),
                           pix_fmt="yuv444p", extra=("-colorspace", "bt709",
                                                     "-color_range", "tv"))
    with open_source(clip) as src:
        frame = next(src)
        assert src.decode_matrix == "bt709"
    got = _patch_centres(frame.rgb)
    want = _expected(BARS_709_8BIT, "bt709", in_bits=8, out_bits=8)
    np.testing.assert_array_equal(got, want)  # exact: zimg rounds correctly
    # and the bars are the 75 % bars: every channel 0 or 0.75·255 → 191 (±1 from 8-bit codes)
    assert set(np.unique(got)) <= {0, 1, 190, 191, 192}


def test_bt709_bars_from_420_decode_exactly(tmp_path):
    # 4:2:0 as most clips carry it: chroma at half resolution, flat over each patch centre
    h, w = 16, PATCH * len(BARS_709_8BIT)
    y = np.empty((h, w), np.uint8)
    cb = np.empty((h // 2, w // 2), np.uint8)
    cr = np.empty_like(cb)
    for i, (yy, u, v) in enumerate(BARS_709_8BIT):
        y[:, i * PATCH:(i + 1) * PATCH] = yy
        cb[:, i * PATCH // 2:(i + 1) * PATCH // 2] = u
        cr[:, i * PATCH // 2:(i + 1) * PATCH // 2] = v
    clip = tmp_path / "bars420.mkv"
    ffmpeg("-y", "-f", "rawvideo", "-pix_fmt", "yuv420p", "-s", f"{w}x{h}", "-r", "25",
           "-colorspace", "bt709", "-i", "pipe:0", "-c:v", "ffv1", str(clip),
           input_bytes=y.tobytes() + cb.tobytes() + cr.tobytes())
    with open_source(clip) as src:
        frame = next(src)
    want = _expected(BARS_709_8BIT, "bt709", in_bits=8, out_bits=8)
    np.testing.assert_array_equal(_patch_centres(frame.rgb), want)


@pytest.mark.parametrize("height, tag, matrix", [
    (720, None, "bt709"),    # untagged HD: common-practice guess BT.709
    (16, None, "bt601"),     # untagged small picture: BT.601
    (16, "bt709", "bt709"),  # the tag wins over the size
    (720, "smpte170m", "bt601"),
])
def test_matrix_choice(tmp_path, height, tag, matrix):
    extra = ("-colorspace", tag) if tag else ()
    clip = raw_frames_clip(tmp_path / "bars.mkv", _bar_planes(BARS_709_8BIT, height=height,
                                                              dtype=np.uint8),
                           pix_fmt="yuv444p", n=1, extra=extra)
    with open_source(clip) as src:
        frame = next(src)
        assert src.decode_matrix == matrix
    want = _expected(BARS_709_8BIT, matrix, in_bits=8, out_bits=8)
    np.testing.assert_array_equal(_patch_centres(frame.rgb), want)


def test_matrix_override(tmp_path):
    clip = raw_frames_clip(tmp_path / "bars.mkv", _bar_planes(BARS_709_8BIT, height=16,
                                                              dtype=np.uint8),
                           pix_fmt="yuv444p", n=1, extra=("-colorspace", "bt709"))
    with open_source(clip, matrix="bt2020") as src:
        frame = next(src)
    want = _expected(BARS_709_8BIT, "bt2020", in_bits=8, out_bits=8)
    np.testing.assert_array_equal(_patch_centres(frame.rgb), want)
    with pytest.raises(MediaError, match="matrix 'bt999'"):
        open_source(clip, matrix="bt999")


def test_ten_bit_source_gives_16_bit_codes(tmp_path):
    # 10-bit codes are the 8-bit ones × 4 (BT.709 Table 4: the 2 extra bits are fractions)
    codes10 = BARS_709_8BIT * 4
    clip = raw_frames_clip(tmp_path / "bars10.mkv", _bar_planes(codes10, height=16,
                                                                dtype=np.uint16),
                           pix_fmt="yuv444p10le", n=1, extra=("-colorspace", "bt709"))
    assert probe(clip).source_bits == 10
    with open_source(clip) as src:
        frame = next(src)
    assert frame.rgb.dtype == np.uint16
    want = _expected(codes10, "bt709", in_bits=10, out_bits=16)
    got = _patch_centres(frame.rgb)
    # 16-bit full range; zimg works in float, allow 2 codes of 65535 for its rounding path
    assert np.max(np.abs(got - want)) <= 2, (got, want)


def test_fast_converter_is_close(tmp_path):
    clip = raw_frames_clip(tmp_path / "bars.mkv", _bar_planes(BARS_709_8BIT, height=16,
                                                              dtype=np.uint8),
                           pix_fmt="yuv444p", n=1, extra=("-colorspace", "bt709"))
    with open_source(clip, exact_colour=False) as src:
        frame = next(src)
        assert not src.exact_colour
    want = _expected(BARS_709_8BIT, "bt709", in_bits=8, out_bits=8)
    assert np.max(np.abs(_patch_centres(frame.rgb) - want)) <= 3  # documented bound


def test_rgb_clip_is_not_matrixed(clip_dir):
    with open_source(clip_dir / "rgb16.mkv") as src:
        assert src.decode_matrix is None
        assert next(src).rgb.dtype == np.uint16


# --------------------------------------------------------------------------- timing
def _all_frames(path, **kw):
    with open_source(path, **kw) as src:
        return list(src)


def test_window_frames_and_times(clip_dir):
    frames = _all_frames(clip_dir / "tone.mp4", start_s=1.0, duration_s=0.4)
    # 25 Hz: frames 25 … 34 (ceil(1.0·25) to ceil(1.4·25) − 1)
    assert [f.index for f in frames] == list(range(25, 35))
    assert [f.time_s for f in frames] == pytest.approx([i / 25 for i in range(25, 35)])


def test_window_matches_full_decode(clip_dir):
    full = _all_frames(clip_dir / "ntsc.mp4")
    part = _all_frames(clip_dir / "ntsc.mp4", start_s=1.0)
    first = part[0].index
    assert first == 30  # ceil(1.0 s × 30000/1001 Hz) = ceil(29.97)
    assert len(part) == 60 - first
    for f in part:
        np.testing.assert_array_equal(f.rgb, full[f.index].rgb)


def test_seek_and_restart(clip_dir):
    full = _all_frames(clip_dir / "tone.mp4")
    with open_source(clip_dir / "tone.mp4") as src:
        next(src)
        src.seek(1.5)
        f = next(src)
        assert f.index == 38  # ceil(1.5 s × 25 Hz) = ceil(37.5)
        np.testing.assert_array_equal(f.rgb, full[38].rgb)
        src.restart()
        g = next(src)
        assert g.index == 0
        np.testing.assert_array_equal(g.rgb, full[0].rgb)
        with pytest.raises(MediaError, match="cannot seek to 9"):
            src.seek(9.0)


def test_loop_repeats_the_window(clip_dir):
    with open_source(clip_dir / "tone.mp4", start_s=1.8, loop=True) as src:
        got = [(f.index, f.lap) for f, _ in zip(src, range(12), strict=False)]
    assert got == [(45, 0), (46, 0), (47, 0), (48, 0), (49, 0),
                   (45, 1), (46, 1), (47, 1), (48, 1), (49, 1), (45, 2), (46, 2)]


def test_start_past_end(clip_dir):
    with pytest.raises(MediaError, match="tone.mp4.*past the end"):
        open_source(clip_dir / "tone.mp4", start_s=2.5)


def test_short_clip_warns_with_count(clip_dir):
    # A clip that decodes fewer frames than promised (here: the promise is raised by 7
    # frames, as a file damaged after probing would look) is delivered with a warning.
    info = dataclasses.replace(probe(clip_dir / "tone.mp4"), n_frames=57)
    src = ClipSource(info)
    with pytest.warns(TruncatedMediaWarning, match=r"tone\.mp4.*after 50 frames.*7 fewer"):
        frames = list(src)
    src.close()
    assert len(frames) == 50 and src.frames_missing == 7


# --------------------------------------------------------------------------- stills
def test_still_16_bit_round_trip(tmp_path):
    img = np.random.default_rng(3).integers(0, 65536, (21, 33, 3), dtype=np.uint16)
    write_still(tmp_path / "s.png", img)
    with open_source(tmp_path / "s.png") as src:
        frames = list(src)
    assert len(frames) == 1
    np.testing.assert_array_equal(frames[0].rgb, img)


def test_still_loops_as_copies(tmp_path):
    img = np.zeros((4, 6, 3), np.uint8)
    write_still(tmp_path / "s.png", img)
    with open_source(tmp_path / "s.png", loop=True) as src:
        a, b = next(src), next(src)
    assert (a.index, a.lap, b.index, b.lap) == (0, 0, 0, 1)
    a.rgb[:] = 9
    assert b.rgb.max() == 0  # each frame is the caller's own array
