"""Waveform monitor: level histogram per column, checked against BT.709 bar levels."""

from __future__ import annotations

import colour
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.errors import ConfigError, LivecurveError
from livecurve.monitors.waveform import (
    GRATICULE_MV,
    level_to_row,
    row_to_level_mv,
    trace_offsets_v,
    waveform,
)
from tests.monitors.frames import BARS, bars_rgb, rgb_frame

# 8-bit Y′/Cb/Cr of BT.709 75 % bars: REFERENCES.md ("computed from BT.709 with 75 %
# amplitude; SMPTE RP 219 defines HD bars").
BT709_75_CODES = {
    "white": (180, 128, 128), "yellow": (168, 44, 136), "cyan": (145, 147, 44),
    "green": (133, 63, 52), "magenta": (63, 193, 204), "red": (51, 109, 212),
    "blue": (28, 212, 120),
}
# Half an 8-bit code in mV: codes are rounded, so a code-derived level is only good to this.
Y_HALF_CODE_MV = 0.5 * 700 / 219   # Y′ 16…235 spans 700 mV (ITU-R BT.709 8-bit range)
C_HALF_CODE_MV = 0.5 * 700 / 224   # Cb/Cr 16…240 spans ±350 mV


def _occupied_rows(counts_col):
    return np.flatnonzero(counts_col)


def test_trace_offsets_put_every_trace_zero_at_its_real_level():
    # Y′ centred by 350 mV (component.centre_offsets_v); Pb/Pr drawn with a 350 mV shift.
    np.testing.assert_array_equal(trace_offsets_v("ypbpr"), [0.35, 0.35, 0.35])
    np.testing.assert_array_equal(trace_offsets_v("rgb"), [0.35, 0.35, 0.35])
    assert GRATICULE_MV == (0.0, 700.0)


def test_level_to_row_mapping_is_the_documented_line():
    # 800 rows over −50…750 mV: 1 mV per row, row 0 at the top.
    kw = dict(rows=800, lo_mv=-50.0, hi_mv=750.0)
    assert level_to_row(750.0, **kw) == 0
    assert level_to_row(749.5, **kw) == 0
    assert level_to_row(700.0, **kw) == 50
    assert level_to_row(0.0, **kw) == 750
    assert level_to_row(-49.9, **kw) == 799
    assert level_to_row(-50.0, **kw) == 799     # bottom edge clamps into the last row
    assert level_to_row(5000.0, **kw) == 0      # out of range piles up at the edges
    assert level_to_row(-5000.0, **kw) == 799
    assert level_to_row(np.nan, **kw) == -1
    np.testing.assert_array_equal(level_to_row([700.0, 0.0], **kw), [50, 750])
    assert row_to_level_mv(50, **kw) == 700.0


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_bt709_75pc_bars_land_on_reference_levels(space):
    rows, lo, hi = 800, -50.0, 750.0
    bar_w = 10
    planes = rgb_frame(bars_rgb(amplitude=0.75, bar_width=bar_w), space=space)
    counts = waveform(planes, space=space, rows=rows, lo_mv=lo, hi_mv=hi)
    assert counts.shape == (3, rows, bar_w * len(BARS)) and counts.dtype == np.uint32
    kr, kb = colour.WEIGHTS_YCBCR["ITU-R BT.709"]
    for i, (name, rgb) in enumerate(BARS):
        col = counts[:, :, i * bar_w + bar_w // 2]
        rgb75 = 0.75 * np.array(rgb)
        # exact levels from colour-science (Y′ 0…1, Cb/Cr ±0.5), scaled to 700 mV
        ycc = colour.RGB_to_YCbCr(rgb75, K=colour.WEIGHTS_YCBCR["ITU-R BT.709"],
                                  out_legal=False)
        if space == "ypbpr":
            levels = [ycc[0] * 700, ycc[1] * 700 + 350, ycc[2] * 700 + 350]
        else:
            levels = list(rgb75 * 700)
        offs = trace_offsets_v(space)
        for c in range(3):
            occ = _occupied_rows(col[c])
            assert occ.size == 1, (name, c, occ)
            # the float32 plane holds the level to ~1e-5 mV ...
            held_mv = (np.float64(planes[c, 0, i * bar_w]) + offs[c]) * 1000.0
            assert held_mv == pytest.approx(levels[c], abs=1e-4), (name, c)
            # ... and the kernel puts it in exactly the documented row
            assert occ[0] == level_to_row(held_mv, rows=rows, lo_mv=lo, hi_mv=hi), (name, c)
            assert col[c, occ[0]] == planes.shape[1]
        if space == "ypbpr":
            # and on REFERENCES.md's 8-bit codes, converted to mV, within half a code
            y8, cb8, cr8 = BT709_75_CODES[name]
            ref_mv = [(y8 - 16) / 219 * 700, (cb8 - 128) / 224 * 700 + 350,
                      (cr8 - 128) / 224 * 700 + 350]
            tol = [Y_HALF_CODE_MV, C_HALF_CODE_MV, C_HALF_CODE_MV]
            for c in range(3):
                r = _occupied_rows(col[c])[0]
                top = row_to_level_mv(r, rows=rows, lo_mv=lo, hi_mv=hi)
                assert top - 1.0 - tol[c] <= ref_mv[c] <= top + tol[c], (name, c, ref_mv[c], top)
    assert kr == pytest.approx(0.2126) and kb == pytest.approx(0.0722)


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_flat_field_gives_exactly_one_row_per_column(space):
    h, w = 37, 53
    planes = np.empty((3, h, w), np.float32)
    planes[0], planes[1], planes[2] = 0.123, -0.2, 0.31
    counts = waveform(planes, space=space)
    offs = trace_offsets_v(space)
    for c in range(3):
        occupied = (counts[c] > 0).sum(axis=0)
        np.testing.assert_array_equal(occupied, np.ones(w))
        np.testing.assert_array_equal(counts[c].sum(axis=0), np.full(w, h))
        level = (np.float64(planes[c, 0, 0]) + offs[c]) * 1000
        assert np.all(counts[c, level_to_row(level)] == h)


def _reference(planes, space, rows, lo, hi, cols):
    """Straight numpy histogram built from level_to_row (independent of the kernel)."""
    _, h, w = planes.shape
    ref = np.zeros((3, rows, cols), np.int64)
    offs = trace_offsets_v(space)
    xcol = np.broadcast_to(np.arange(w) * cols // w, (h, w))
    for c in range(3):
        mv = (planes[c].astype(np.float64) + offs[c]) * 1000.0
        r = level_to_row(mv, rows=rows, lo_mv=lo, hi_mv=hi)
        ok = r >= 0
        np.add.at(ref[c], (r[ok], xcol[ok]), 1)
    return ref


def _off_boundaries(planes, space, rows, lo, hi):
    # the kernel's expanded float64 line may differ from level_to_row by rounding only
    # right at a row boundary: keep test samples clear of boundaries so the check is exact
    f = (hi - (planes.astype(np.float64) + trace_offsets_v(space)[:, None, None]) * 1000) \
        * rows / (hi - lo)
    with np.errstate(invalid="ignore"):
        frac = np.abs(f - np.round(f))
    return bool(np.all((frac > 1e-7) | ~np.isfinite(f)))


@pytest.mark.parametrize("cols", [None, 7, 33])
def test_random_frame_matches_numpy_reference(cols):
    rng = np.random.default_rng(11)
    planes = rng.uniform(-0.5, 0.5, (3, 41, 66)).astype(np.float32)  # includes out-of-range
    planes[0, 3, 5] = np.nan
    planes[2, 10, 60] = np.inf
    planes[1, 0, :4] = -np.inf
    assert _off_boundaries(planes, "ypbpr", 120, -50.0, 750.0)
    got = waveform(planes, space="ypbpr", rows=120, columns=cols)
    ref = _reference(planes, "ypbpr", 120, -50.0, 750.0, cols or 66)
    np.testing.assert_array_equal(got, ref)
    # a NaN sample is not counted anywhere; infinities pile up at the edges
    assert got[0].sum() == planes[0].size - 1


def test_infinities_clamp_to_edge_rows_and_nan_is_dropped():
    planes = np.zeros((3, 2, 3), np.float32)
    planes[0, 0, 0] = np.inf
    planes[0, 1, 0] = -np.inf
    planes[0, 0, 1] = np.nan
    got = waveform(planes, space="rgb", rows=64)
    assert got[0, 0, 0] == 1 and got[0, 63, 0] == 1      # +inf top row, −inf bottom row
    assert got[0, :, 1].sum() == 1                        # the NaN sample is missing


def test_binned_columns_equal_summed_full_columns():
    rng = np.random.default_rng(3)
    planes = rng.uniform(-0.3, 0.3, (3, 20, 90)).astype(np.float32)
    full = waveform(planes, space="ypbpr", rows=64).astype(np.int64)
    binned = waveform(planes, space="ypbpr", rows=64, columns=30)
    np.testing.assert_array_equal(binned, full.reshape(3, 64, 30, 3).sum(axis=3))


def test_single_channel_counts_only_that_channel():
    rng = np.random.default_rng(4)
    planes = rng.uniform(-0.3, 0.3, (3, 16, 70)).astype(np.float32)
    out = np.full((3, 256, 70), 77, np.uint32)   # stale contents must be overwritten
    got = waveform(planes, space="ypbpr", channels=(0,), out=out)
    assert got is out
    np.testing.assert_array_equal(got[0], waveform(planes, space="ypbpr")[0])
    assert not got[1:].any()


def test_split_frame_equals_whole_frame():
    # invariant: the waveform of a frame is its column halves' waveforms side by side
    rng = np.random.default_rng(5)
    planes = rng.uniform(-0.4, 0.4, (3, 9, 130)).astype(np.float32)
    whole = waveform(planes, space="rgb", rows=100)
    left = waveform(planes[:, :, :64], space="rgb", rows=100)
    right = waveform(planes[:, :, 64:], space="rgb", rows=100)
    np.testing.assert_array_equal(whole, np.concatenate([left, right], axis=2))


@settings(max_examples=25, deadline=None)
@given(h=st.integers(1, 12), w=st.integers(1, 40), rows=st.integers(2, 300),
       seed=st.integers(0, 2**31 - 1), lo=st.floats(-400, 300), span=st.floats(10, 900))
def test_every_sample_is_counted_once(h, w, rows, seed, lo, span):
    planes = np.random.default_rng(seed).uniform(-1, 1, (3, h, w)).astype(np.float32)
    got = waveform(planes, space="ypbpr", rows=rows, lo_mv=lo, hi_mv=lo + span)
    np.testing.assert_array_equal(got.sum(axis=1), np.full((3, w), h))


def test_float64_input_is_read_as_float32():
    planes64 = np.random.default_rng(6).uniform(-0.3, 0.3, (3, 5, 8))
    np.testing.assert_array_equal(waveform(planes64, space="ypbpr"),
                                  waveform(planes64.astype(np.float32), space="ypbpr"))


@pytest.mark.parametrize("kwargs, key", [
    (dict(planes=np.zeros((4, 2, 2), np.float32), space="ypbpr"), "planes"),
    (dict(planes=np.zeros((3, 2), np.float32), space="ypbpr"), "planes"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="xyz"), "space"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="rgb", rows=1), "rows"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="rgb", lo_mv=5, hi_mv=5), "lo_mv"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="rgb", columns=3), "columns"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="rgb", channels=(3,)), "channels"),
    (dict(planes=np.zeros((3, 2, 2), np.float32), space="rgb",
          out=np.zeros((3, 256, 2), np.int32)), "out"),
    (dict(planes=np.zeros((3, 2, 2), complex), space="rgb"), "planes"),
])
def test_bad_input_names_the_argument(kwargs, key):
    planes = kwargs.pop("planes")
    with pytest.raises(ConfigError) as exc:
        waveform(planes, **kwargs)
    assert key in str(exc.value)
    assert isinstance(exc.value, LivecurveError)
