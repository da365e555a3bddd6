"""Level alarms and the zebra mask: exact counts on synthetic frames."""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.monitors.alarms import (
    MASK_CLIPPED,
    MASK_OUTSIDE_LEGAL,
    level_alarms,
    zebra_mask,
)
from livecurve.signal.component import legal_range_v

# Output converter range used in these tests: 0.5 V either side of the centre (exact in
# float32, so the "on the limit is not clipped" rule can be checked exactly).
CONVERTER = np.array([[-0.5, 0.5]] * 3)


def _frame():
    """20×10 frame at 0 V with a known number of samples put outside each limit."""
    p = np.zeros((3, 10, 20), np.float32)
    p[0, 0, :7] = 0.40          # 7 above legal (±350 mV), within the converter
    p[0, 1, :3] = 0.60          # 3 above legal and clipped high
    p[1, 2, :5] = -0.36         # 5 below legal
    p[1, 3, :2] = -0.75         # 2 below legal and clipped low
    p[2, 0, :4] = -0.40         # 4 below legal in pixels already counted for channel 0
    p[2, 9, 19] = 0.5           # exactly on the converter limit: outside legal, not clipped
    return p


def test_counts_and_shares_are_exact():
    a = level_alarms(_frame(), space="ypbpr", converter_limits_v=CONVERTER)
    assert a.channels == ("Y′", "Pb", "Pr")
    np.testing.assert_array_equal(a.above_legal, [10, 0, 1])
    np.testing.assert_array_equal(a.below_legal, [0, 7, 4])
    np.testing.assert_array_equal(a.clipped_high, [3, 0, 0])
    np.testing.assert_array_equal(a.clipped_low, [0, 2, 0])
    np.testing.assert_array_equal(a.invalid, [0, 0, 0])
    assert a.total == 200
    # pixels: rows 0 (7), 1 (3), 2 (5), 3 (2), plus (9, 19); channel 2's four in row 0
    # are the same pixels as channel 0's
    assert a.pixels_outside_legal == 7 + 3 + 5 + 2 + 1
    assert a.pixels_clipped == 3 + 2
    np.testing.assert_array_equal(a.share_outside_legal, np.array([10, 7, 5]) / 200)
    np.testing.assert_array_equal(a.share_clipped, np.array([3, 2, 0]) / 200)
    assert a.as_dict()["pixels_clipped"] == 5


def test_default_legal_range_is_the_nominal_component_range():
    # ±350 mV centred for every channel (livecurve.signal.component.legal_range_v)
    p = _frame()
    a = level_alarms(p, space="rgb", converter_limits_v=CONVERTER)
    b = level_alarms(p, space="rgb", converter_limits_v=CONVERTER,
                     legal_range_v=legal_range_v("rgb"))
    assert a.as_dict() == b.as_dict()
    np.testing.assert_array_equal(a.above_legal, [10, 0, 1])
    assert a.channels == ("R′", "G′", "B′")


def test_sample_on_a_limit_is_inside():
    p = np.zeros((3, 1, 4), np.float32)
    p[0] = [-0.25, 0.25, -0.2500001, 0.2500001]
    a = level_alarms(p, space="rgb", converter_limits_v=(-0.25, 0.25),
                     legal_range_v=(-0.25, 0.25))
    assert a.below_legal[0] == 1 and a.above_legal[0] == 1
    assert a.clipped_low[0] == 1 and a.clipped_high[0] == 1


def test_nan_is_invalid_not_legal_or_clipped():
    p = np.zeros((3, 2, 2), np.float32)
    p[1, 0, 0] = np.nan
    a = level_alarms(p, space="ypbpr", converter_limits_v=CONVERTER)
    np.testing.assert_array_equal(a.invalid, [0, 1, 0])
    assert a.pixels_outside_legal == 0 and a.pixels_clipped == 0


def test_unstriped_mask_marks_exactly_the_alarmed_pixels():
    p = _frame()
    a = level_alarms(p, space="ypbpr", converter_limits_v=CONVERTER)
    m = zebra_mask(p, space="ypbpr", converter_limits_v=CONVERTER, striped=False)
    assert m.shape == (10, 20) and m.dtype == np.uint8
    assert int((m == MASK_CLIPPED).sum()) == a.pixels_clipped
    assert int((m != 0).sum()) == a.pixels_outside_legal
    # reference from numpy (limits compared in float64)
    v = p.astype(np.float64)
    clip = ((v < -0.5) | (v > 0.5)).any(axis=0)
    out = ((v < -0.35) | (v > 0.35)).any(axis=0)
    ref = np.where(clip, MASK_CLIPPED, np.where(out, MASK_OUTSIDE_LEGAL, 0))
    np.testing.assert_array_equal(m, ref)


@pytest.mark.parametrize("stripe, phase", [(1, 0), (3, 0), (4, 5), (6, 13)])
def test_stripes_keep_alarmed_pixels_on_even_diagonal_bands(stripe, phase):
    rng = np.random.default_rng(41)
    p = rng.uniform(-0.6, 0.6, (3, 23, 31)).astype(np.float32)
    full = zebra_mask(p, space="rgb", converter_limits_v=CONVERTER, striped=False)
    striped = zebra_mask(p, space="rgb", converter_limits_v=CONVERTER, stripe_px=stripe,
                         phase=phase)
    y, x = np.mgrid[:23, :31]
    keep = ((x + y + phase) // stripe) % 2 == 0
    np.testing.assert_array_equal(striped, np.where(keep, full, 0))
    assert striped.any() and (full != 0).sum() > (striped != 0).sum()


@pytest.mark.parametrize("kwargs, key", [
    (dict(converter_limits_v=(0.5, -0.5)), "converter_limits_v"),
    (dict(converter_limits_v=np.zeros((2, 2))), "converter_limits_v"),
    (dict(converter_limits_v=CONVERTER, legal_range_v=(np.nan, 1)), "legal_range_v"),
    (dict(converter_limits_v=CONVERTER, space="cmyk"), "space"),
])
def test_bad_limits_name_the_argument(kwargs, key):
    kwargs.setdefault("space", "ypbpr")
    with pytest.raises(ConfigError, match=key):
        level_alarms(np.zeros((3, 2, 2), np.float32), **kwargs)
    with pytest.raises(ConfigError, match="stripe_px"):
        zebra_mask(np.zeros((3, 2, 2), np.float32), space="rgb",
                   converter_limits_v=CONVERTER, stripe_px=0)
