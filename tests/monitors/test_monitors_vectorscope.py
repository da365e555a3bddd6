"""Vectorscope: Pb/Pr histogram and bar targets, checked against BT.709 and colour-science."""

from __future__ import annotations

import colour
import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.monitors.vectorscope import (
    BAR_RGB,
    bar_targets,
    hue_angle_deg,
    level_to_cell,
    skin_line_angle_deg,
    vectorscope,
)
from tests.monitors.frames import BARS, bars_rgb, rgb_frame

# 8-bit Cb/Cr of BT.709 75 % bars: REFERENCES.md (computed from BT.709 with 75 % amplitude).
BT709_75_CBCR = {
    "yellow": (44, 136), "cyan": (147, 44), "green": (63, 52),
    "magenta": (193, 204), "red": (109, 212), "blue": (212, 120),
}
C_HALF_CODE_V = 0.5 * 0.700 / 224   # half an 8-bit Cb/Cr code (16…240 spans ±350 mV)
EXACT_V = 1e-12                      # float64 round-off for a 3×3 matrix product


@pytest.mark.parametrize("standard, name", [("bt601", "ITU-R BT.601"),
                                            ("bt709", "ITU-R BT.709"),
                                            ("bt2020", "ITU-R BT.2020")])
@pytest.mark.parametrize("amplitude", [0.75, 1.0])
def test_bar_targets_match_colour_science(standard, name, amplitude):
    # colour.RGB_to_YCbCr with out_legal=False gives Pb/Pr in ±0.5 (REFERENCES.md)
    targets = bar_targets(standard, amplitude)
    assert set(targets) == set(BAR_RGB)
    for bar, rgb in BAR_RGB.items():
        _, cb, cr = colour.RGB_to_YCbCr(amplitude * np.array(rgb),
                                        K=colour.WEIGHTS_YCBCR[name], out_legal=False)
        assert targets[bar][0] == pytest.approx(cb * 0.7, abs=EXACT_V)
        assert targets[bar][1] == pytest.approx(cr * 0.7, abs=EXACT_V)


def test_bar_targets_match_reference_codes():
    targets = bar_targets("bt709", 0.75)
    for bar, (cb8, cr8) in BT709_75_CBCR.items():
        pb_v, pr_v = targets[bar]
        assert abs(pb_v - (cb8 - 128) / 224 * 0.7) <= C_HALF_CODE_V, bar
        assert abs(pr_v - (cr8 - 128) / 224 * 0.7) <= C_HALF_CODE_V, bar


def test_full_amplitude_blue_and_red_reach_the_nominal_peak():
    # Pb = (B′ − Y′)/(2(1 − Kb)) is +0.5 for pure blue, Pr +0.5 for pure red (BT.709),
    # i.e. +350 mV on the analog interface.
    t = bar_targets("bt709", 1.0)
    assert t["blue"][0] == pytest.approx(0.35, abs=EXACT_V)
    assert t["red"][1] == pytest.approx(0.35, abs=EXACT_V)
    assert t["yellow"][0] == pytest.approx(-0.35, abs=EXACT_V)
    assert t["cyan"][1] == pytest.approx(-0.35, abs=EXACT_V)


def test_skin_line_lies_between_red_and_yellow():
    # common practice, from memory: the skin-tone line sits at about 123°, between the
    # red and yellow bar directions
    t = bar_targets("bt709", 0.75)
    red = hue_angle_deg(*t["red"])
    yellow = hue_angle_deg(*t["yellow"])
    assert red < skin_line_angle_deg() < yellow
    assert skin_line_angle_deg() == pytest.approx(123.0)


def test_level_to_cell_mapping():
    kw = dict(size=200, span_mv=400.0)   # 4 mV per cell
    assert level_to_cell(0.0, 0.0, **kw) == (100, 100)
    assert level_to_cell(-400.0, 399.9, **kw) == (0, 0)
    assert level_to_cell(399.9, -399.9, **kw) == (199, 199)
    assert level_to_cell(400.0, 0.0, **kw) == (-1, -1)         # outside: dropped
    assert level_to_cell(np.nan, 0.0, **kw) == (-1, -1)
    r, c = level_to_cell([5.0, -5.0], [9.0, -9.0], **kw)
    np.testing.assert_array_equal(c, [101, 98])
    np.testing.assert_array_equal(r, [97, 102])               # Pr up: positive Pr → smaller row


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_bt709_75pc_bars_peak_on_targets(space):
    bar_w, h = 10, 6
    planes = rgb_frame(bars_rgb(amplitude=0.75, height=h, bar_width=bar_w), space=space)
    # 257 cells over ±400 mV keeps every 75 % target > 0.09 cell from a cell edge (with 256
    # the yellow bar's Pb of −262.5 mV falls exactly on one), so float32 rounding of the
    # planes cannot move a bar to the next cell
    size, span = 257, 400.0
    hist = vectorscope(planes, space=space, standard="bt709", size=size, span_mv=span)
    assert hist.shape == (size, size) and hist.dtype == np.uint32
    expected = np.zeros((size, size), np.int64)
    targets = bar_targets("bt709", 0.75)
    for name, _ in BARS:
        pb, pr = targets.get(name, (0.0, 0.0))      # white sits at the centre
        fx = (pb * 1000 + span) * size / (2 * span)
        fy = (span - pr * 1000) * size / (2 * span)
        assert min(abs(fx - round(fx)), abs(fy - round(fy))) > 0.09, name
        r, c = level_to_cell(pb * 1000, pr * 1000, size=size, span_mv=span)
        expected[r, c] += bar_w * h
    np.testing.assert_array_equal(hist, expected)


def test_random_ypbpr_frame_matches_numpy_reference():
    rng = np.random.default_rng(21)
    planes = rng.uniform(-0.45, 0.45, (3, 33, 47)).astype(np.float32)  # some outside ±400 mV
    planes[1, 0, 0] = np.nan
    size, span = 96, 400.0
    got = vectorscope(planes, space="ypbpr", standard="bt709", size=size, span_mv=span)
    pb_mv = planes[1].astype(np.float64) * 1000.0
    pr_mv = planes[2].astype(np.float64) * 1000.0
    r, c = level_to_cell(pb_mv, pr_mv, size=size, span_mv=span)
    ok = r >= 0
    ref = np.zeros((size, size), np.int64)
    np.add.at(ref, (r[ok], c[ok]), 1)
    np.testing.assert_array_equal(got, ref)
    assert got.sum() < planes[0].size        # out-of-square points and the NaN are dropped


def test_out_buffer_is_reused_and_overwritten():
    planes = np.zeros((3, 4, 4), np.float32)
    out = np.full((64, 64), 9, np.uint32)
    got = vectorscope(planes, space="ypbpr", standard="bt709", size=64, out=out)
    assert got is out and got.sum() == 16 and got[32, 32] == 16


@pytest.mark.parametrize("kwargs, key", [
    (dict(space="ypbpr", standard="bt999"), "standard"),
    (dict(space="hsv", standard="bt709"), "space"),
    (dict(space="ypbpr", standard="bt709", size=1), "size"),
    (dict(space="ypbpr", standard="bt709", span_mv=0), "span_mv"),
    (dict(space="ypbpr", standard="bt709", out=np.zeros((8, 8), np.uint32)), "out"),
])
def test_bad_input_names_the_argument(kwargs, key):
    with pytest.raises(ConfigError, match=key):
        vectorscope(np.zeros((3, 2, 2), np.float32), **kwargs)
    with pytest.raises(ConfigError, match="amplitude"):
        bar_targets("bt709", 1.5)
