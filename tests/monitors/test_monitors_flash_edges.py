"""Each threshold of the flash estimate just below, at and just above its value.

Thresholds and the guidance they implement (ITU-R BT.1702, "Guidance for the reduction
of photosensitive epileptic seizures caused by television", 2005 — all from memory; see
livecurve/monitors/flash.py for the caveat):

* general flash: a pair of opposing luminance changes of 20 cd/m² **or more**, where the
  darker level is **below** 160 cd/m² (BT.1702's general-flash guidance);
* rate: **more than three** flashes within any one-second period is a hazard (its
  flash-frequency guidance);
* area: flashes count when they occupy a quarter of the screen (its screen-area guidance;
  the meter counts from 25 % inclusive, which is the reading flash.py documents);
* saturated red: a transition to or from saturated red, with R/(R+G+B) ≥ 0.8 and a
  change of max(0, R−G−B)·320 of **more than** 20 (the working definition flash.py
  attributes to Harding & Binnie 2002, from memory; BT.1702 itself names saturated red
  without a number).

The meter is fed per-cell linear R, G, B (cd/m²) directly, bypassing the display EOTF
table (whose interpolation is off by ~1e-3 cd/m²), so that each threshold can be met
exactly in float64; everything after the cell levels (luminance, ratio, swings, 1 s
window, area, verdict) is the meter's own code.  "Just below/above" is 1e-6 of the
threshold's unit.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.monitors.flash import FlashMeter, cell_luminance

FPS = 30.0
ROWS, COLS = 9, 16          # the meter's default grid: 144 cells of equal area
N_CELLS = ROWS * COLS
EPS = 1e-6


class _CellMeter(FlashMeter):
    """The flash meter with its cell levels given directly (cells × (R, G, B), cd/m²)."""

    def __init__(self, **kw):
        super().__init__(FPS, step=1, **kw)
        self._layout(ROWS * 8, COLS * 8)   # equal cells: each 1/144 of the screen
        self._shape = None                 # frames below are cell arrays, not planes

    def cell_rgb_cd_m2(self, planes):
        return np.asarray(planes, dtype=np.float64)


def _exact_grey(lum):
    """Near-grey (R, G, B) whose luminance Kr·R + Kg·G + Kb·B is exactly *lum* in float64
    (blue, the lightest weight, is nudged by a few ulps to land on it)."""
    w = _CellMeter()._weights
    rgb = np.full(3, float(lum))
    for _ in range(200):
        got = float(cell_luminance(rgb, w))
        if got == lum:
            return rgb
        rgb[2] = np.nextafter(rgb[2], np.inf if got < lum else -np.inf)
    raise AssertionError(f"no near-grey gives exactly {lum} cd/m²")


def _run(state_a, state_b, *, hz=10.0, seconds=3.0, mask=None):
    """Alternate two cell states (each (3,) or (N_CELLS, 3)) as a square wave of *hz*;
    cells outside *mask* stay in state_a."""
    a = np.broadcast_to(np.asarray(state_a, float), (N_CELLS, 3))
    b = np.broadcast_to(np.asarray(state_b, float), (N_CELLS, 3)).copy()
    if mask is not None:
        b[~mask] = a[~mask]
    m = _CellMeter()
    for k in range(int(seconds * FPS)):
        m.push(b if (k * hz / FPS) % 1.0 < 0.5 else a)
    return m.report()


# ---- general flash: change of 20 cd/m² or more ------------------------------------------
@pytest.mark.parametrize("delta, counted", [(20.0 - EPS, False), (20.0, True),
                                            (20.0 + EPS, True)])
def test_general_flash_change_threshold(delta, counted):
    lo = _exact_grey(100.0)
    hi = _exact_grey(100.0 + delta)
    w = _CellMeter()._weights
    assert cell_luminance(hi, w) - cell_luminance(lo, w) == (
        20.0 if delta == 20.0 else pytest.approx(delta))
    rep = _run(lo, hi)
    assert (rep.max_flashes_per_s == 10) is counted, rep
    assert rep.max_flashes_per_s in (0, 10)
    assert (rep.verdict == "hazard") is counted


# ---- general flash: darker level below 160 cd/m² ----------------------------------------
@pytest.mark.parametrize("dark, counted", [(160.0 - EPS, True), (160.0, False),
                                           (160.0 + EPS, False)])
def test_general_flash_dark_level_threshold(dark, counted):
    lo = _exact_grey(dark)
    hi = _exact_grey(dark + 30.0)
    rep = _run(lo, hi)
    assert (rep.max_flashes_per_s == 10) is counted, rep
    assert (rep.verdict == "hazard") is counted


# ---- rate: more than 3 flashes in any 1 s -----------------------------------------------
@pytest.mark.parametrize("hz, flashes, verdict", [(2.0, 2, "ok"), (3.0, 3, "warn"),
                                                  (4.0, 4, "hazard")])
def test_flash_rate_threshold(hz, flashes, verdict):
    # 3 Hz at 30 fps: 5 frames each way, so 6 transitions (3 flashes) in every 1 s window
    rep = _run([0.0] * 3, [200.0] * 3, hz=hz, seconds=4.0)
    assert rep.max_flashes_per_s == flashes
    assert rep.verdict == verdict


# ---- area: a quarter of the screen ------------------------------------------------------
@pytest.mark.parametrize("cells, verdict", [(35, "warn"), (36, "hazard"), (37, "hazard")])
def test_flash_area_threshold(cells, verdict):
    """35/144 = 24.3 % (under a quarter, over the meter's own 20 % warning share),
    36/144 = 25 % exactly, 37/144 = 25.7 %."""
    mask = np.zeros(N_CELLS, bool)
    mask[:cells] = True
    rep = _run([0.0] * 3, [200.0] * 3, mask=mask)
    assert rep.max_area_over_limit == pytest.approx(cells / N_CELLS)
    assert rep.verdict == verdict
    assert (rep.max_flashes_per_s == 10) is (verdict == "hazard")


# ---- saturated red: R/(R+G+B) ≥ 0.8 -----------------------------------------------------
@pytest.mark.parametrize("ratio, counted", [(0.8 - EPS, False), (0.8, True),
                                            (0.8 + EPS, True)])
def test_saturated_red_ratio_threshold(ratio, counted):
    # a red of ratio r against black: R = r, G = 1 − r of peak white (200 cd/m²), B = 0.
    # (R − G − B)·320 changes by ≥ 160 > 20, so only the ratio decides.
    red = [200.0 * ratio, 200.0 * (1.0 - ratio), 0.0]
    got = red[0] / 200.0 / (red[0] / 200.0 + red[1] / 200.0)
    assert (got >= 0.8) is counted  # the test's premise, in the meter's arithmetic
    rep = _run([0.0] * 3, red)
    assert (rep.max_red_flashes_per_s == 10) is counted, rep


# ---- saturated red: change of (R − G − B)·320 more than 20 ------------------------------
@pytest.mark.parametrize("change, counted", [(20.0 - EPS, False), (20.0, False),
                                             (20.0 + EPS, True)])
def test_saturated_red_change_threshold(change, counted):
    # pure red (ratio 1) against black: (R/200)·320 = change → R = change·200/320 cd/m²
    # (20 → 12.5 cd/m², exact in float64); its luminance change (≈ 2.7 cd/m²) is far
    # under the general threshold, so only the red rule can count it.
    red = [change * 200.0 / 320.0, 0.0, 0.0]
    rep = _run([0.0] * 3, red)
    assert rep.max_flashes_per_s == 0
    assert (rep.max_red_flashes_per_s == 10) is counted, rep
    assert (rep.verdict == "hazard") is counted
