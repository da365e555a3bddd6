"""Transfer view: the present curve plus where the frame's input sits on it."""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.monitors.transfer import TransferView, transfer_view

CURVE_IN = np.linspace(-0.4, 0.4, 65)
CURVE_OUT = np.tanh(CURVE_IN * 4) / 4     # demo shape only: any monotone curve will do


def _reference_bins(v, lo, hi, bins):
    v = v[~np.isnan(v)].astype(np.float64)
    f = (v - lo) * (bins / (hi - lo))
    inside = (f >= 0) & (f <= bins)
    b = np.minimum(np.floor(f[inside]).astype(np.int64), bins - 1)
    return np.bincount(b, minlength=bins), int((f < 0).sum()), int((f > bins).sum())


def test_counts_match_reference_binning_and_every_sample_is_accounted_for():
    rng = np.random.default_rng(31)
    planes = rng.uniform(-0.5, 0.5, (3, 40, 57)).astype(np.float32)
    planes[1, 2, 3] = np.nan
    planes[2, 0, 0] = np.float32(0.4)       # float32(0.4) > 0.4: just above the curve's end
    view = transfer_view(CURVE_IN, CURVE_OUT, planes, bins=50)
    assert isinstance(view, TransferView)
    assert view.counts.shape == (3, 50) and view.counts.dtype == np.uint32
    for c in range(3):
        ref, below, above = _reference_bins(planes[c].ravel(), -0.4, 0.4, 50)
        np.testing.assert_array_equal(view.counts[c], ref)
        assert view.below[c] == below and view.above[c] == above
        nan = int(np.isnan(planes[c]).sum())
        assert view.counts[c].sum() + below + above + nan == view.total == 40 * 57
        np.testing.assert_array_equal(view.extent_v[c],
                                      [np.nanmin(planes[c]), np.nanmax(planes[c])])


def test_sample_exactly_at_the_last_input_point_goes_in_the_last_bin():
    cin = np.array([-0.5, 0.0, 0.5])       # exactly representable in float32
    planes = np.full((3, 1, 3), 0.5, np.float32)
    planes[:, 0, 0] = -0.5
    planes[:, 0, 1] = 0.0
    view = transfer_view(cin, np.vstack([cin] * 3), planes, bins=4)
    np.testing.assert_array_equal(view.counts[0], [1, 0, 1, 1])
    assert view.below[0] == 0 and view.above[0] == 0


def test_used_span_shows_which_part_of_the_curve_the_picture_uses():
    planes = np.empty((3, 10, 10), np.float32)
    # values kept clear of the 10 mV bin edges
    planes[0] = np.linspace(-0.045, 0.045, 100).reshape(10, 10)  # only the middle
    planes[1] = 0.395                                            # only the top end
    planes[2] = -0.395                                           # only the bottom end
    view = transfer_view(CURVE_IN, CURVE_OUT, planes, bins=80)   # 10 mV bins
    span = view.used_span_v()
    assert span[0] == pytest.approx([-0.05, 0.05])
    assert span[1] == pytest.approx([0.39, 0.40]) and span[2] == pytest.approx([-0.40, -0.39])
    np.testing.assert_allclose(view.occupied_share(), [10 / 80, 1 / 80, 1 / 80])
    np.testing.assert_allclose(view.edges_v[[0, -1]], [-0.4, 0.4])


def test_curve_is_kept_per_channel_and_a_single_row_is_shared():
    planes = np.zeros((3, 2, 2), np.float32)
    view = transfer_view(CURVE_IN, CURVE_OUT, planes)
    assert view.curve_out_v.shape == (3, CURVE_IN.size)
    np.testing.assert_array_equal(view.curve_out_v[2], CURVE_OUT)
    three = np.vstack([CURVE_OUT, 2 * CURVE_OUT, -CURVE_OUT])
    np.testing.assert_array_equal(transfer_view(CURVE_IN, three, planes).curve_out_v, three)


def test_channel_with_only_nan_has_no_extent():
    planes = np.zeros((3, 2, 2), np.float32)
    planes[1] = np.nan
    view = transfer_view(CURVE_IN, CURVE_OUT, planes)
    assert np.all(np.isnan(view.extent_v[1])) and view.counts[1].sum() == 0
    assert np.all(np.isnan(view.used_span_v()[1]))


@pytest.mark.parametrize("cin, cout, key", [
    (np.array([0.0]), np.array([0.0]), "curve_in_v"),
    (np.array([0.0, 0.0, 1.0]), np.zeros(3), "curve_in_v"),
    (np.array([0.0, np.nan]), np.zeros(2), "curve_in_v"),
    (CURVE_IN, np.zeros((2, CURVE_IN.size)), "curve_out_v"),
])
def test_bad_curve_names_the_argument(cin, cout, key):
    with pytest.raises(ConfigError, match=key):
        transfer_view(cin, cout, np.zeros((3, 2, 2), np.float32))
    with pytest.raises(ConfigError, match="bins"):
        transfer_view(CURVE_IN, CURVE_OUT, np.zeros((3, 2, 2), np.float32), bins=0)
