"""Photosensitive flash meter (ITU-R BT.1702 as recalled from memory; see flash.py)."""

from __future__ import annotations

import colour
import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.monitors.flash import FlashMeter, bt1886_eotf
from livecurve.signal.component import rgb_to_ypbpr_matrix
from tests.monitors.frames import grey_for_luminance, rgb_frame

H, W = 72, 128          # 9×16 grid of 8×8-pixel cells
FPS = 30.0
LUT_CD_M2 = 1e-3        # the meter's 4097-entry EOTF table vs the closed form, cd/m²


def _grey(e):
    """Planes (ypbpr, BT.709) of a grey picture with normalised level map *e* (H, W)."""
    e = np.broadcast_to(np.asarray(e, dtype=np.float64), (H, W))
    return rgb_frame(np.repeat(e[:, :, None], 3, axis=2), space="ypbpr")


def _square(k, hz, fps=FPS):
    """True on the first half of each period of a *hz* square wave at frame *k*."""
    return (k * hz / fps) % 1.0 < 0.5


def _run(frames, **kw):
    m = FlashMeter(FPS, step=1, **kw)
    for p in frames:
        m.push(p)
    return m.report()


def _flicker(hz, lo_cd, hi_cd, seconds=3.0, mask=None):
    lo, hi = grey_for_luminance(lo_cd), grey_for_luminance(hi_cd)
    base = np.full((H, W), lo)
    for k in range(int(seconds * FPS)):
        e = base.copy()
        if _square(k, hz):
            if mask is None:
                e[:] = hi
            else:
                e[mask] = hi
        yield _grey(e)


@pytest.mark.parametrize("lb", [0.0, 0.1])
def test_eotf_matches_colour_science_bt1886(lb):
    v = np.linspace(0, 1, 101)
    ours = bt1886_eotf(v, white_cd_m2=200.0, black_cd_m2=lb)
    ref = colour.models.eotf_BT1886(v, L_B=lb, L_W=200.0)   # ITU-R BT.1886 Annex 1
    np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12)
    assert bt1886_eotf(1.5) == pytest.approx(200.0) and bt1886_eotf(-0.2) == 0.0  # clips


def test_cell_luminance_matches_direct_computation():
    rng = np.random.default_rng(51)
    rgb = rng.uniform(-0.05, 1.05, (H, W, 3))       # includes sub-black and super-white
    planes = rgb_frame(rgb, space="ypbpr")
    m = FlashMeter(FPS, step=1)
    got = m.cell_rgb_cd_m2(planes)
    # direct: R′G′B′ back from the float32 planes, BT.1886 per channel, cell means
    comp = (planes.astype(np.float64) + np.array([0.35, 0, 0])[:, None, None]) / 0.7
    back = np.einsum("ij,jhw->ihw", np.linalg.inv(rgb_to_ypbpr_matrix("bt709")), comp)
    lum = bt1886_eotf(back)
    ref = lum.reshape(3, 9, 8, 16, 8).mean(axis=(2, 4)).reshape(3, -1).T
    np.testing.assert_allclose(got, ref, atol=LUT_CD_M2)


def test_frame_and_cell_means():
    e = np.zeros((H, W))
    e[:, : W // 2] = 1.0                         # left half at peak white (200 cd/m²)
    e[:8, W // 2: W // 2 + 8] = grey_for_luminance(50.0)
    frame = FlashMeter(FPS, step=1).push(_grey(e))
    assert frame.cells_cd_m2.shape == (9, 16)
    np.testing.assert_allclose(frame.cells_cd_m2[:, :8], 200.0, atol=LUT_CD_M2)
    assert frame.cells_cd_m2[0, 8] == pytest.approx(50.0, abs=LUT_CD_M2)
    np.testing.assert_allclose(frame.cells_cd_m2[1:, 8:], 0.0, atol=LUT_CD_M2)
    assert frame.mean_cd_m2 == pytest.approx(100.0 + 50.0 / 144, abs=LUT_CD_M2)
    assert frame.index == 0 and frame.level == "ok"


def test_full_screen_10hz_black_white_flicker_is_a_hazard():
    rep = _run(_flicker(10, 0.0, 200.0))
    assert rep.verdict == "hazard"
    assert rep.max_flashes_per_s == 10          # 20 transitions a second, 2 per flash
    assert rep.max_area_over_limit == pytest.approx(1.0)
    assert rep.first_hazard_s is not None and rep.first_hazard_s < 1.0
    assert rep.mean_cd_m2.shape == (90,)
    assert rep.mean_cd_m2.max() == pytest.approx(200.0, abs=LUT_CD_M2)


def test_slow_two_second_fade_up_and_down_is_ok():
    n = int(2 * FPS)
    ramp = np.concatenate([np.linspace(0, 1, n), np.linspace(1, 0, n)])
    rep = _run(_grey(np.full((H, W), e)) for e in ramp)
    assert rep.verdict == "ok"
    assert rep.max_flashes_per_s == 0


def test_small_flickering_patch_under_area_threshold_is_ok():
    mask = np.zeros((H, W), bool)
    mask[8:24, 16:32] = True                    # 2×2 cells of 144: 2.8 % of the screen
    rep = _run(_flicker(10, 0.0, 200.0, mask=mask))
    assert rep.verdict == "ok"
    assert rep.max_flashes_per_s == 0
    assert rep.max_area_over_limit == pytest.approx(4 / 144)


@pytest.mark.parametrize("cells, verdict", [((4, 8), "warn"), ((5, 8), "hazard")])
def test_patch_area_either_side_of_the_threshold(cells, verdict):
    # 32/144 = 22 % (over our 20 % warning share, under BT.1702's 25 %); 40/144 = 28 %
    mask = np.zeros((H, W), bool)
    mask[:cells[0] * 8, :cells[1] * 8] = True
    rep = _run(_flicker(10, 0.0, 200.0, mask=mask))
    assert rep.verdict == verdict
    assert rep.max_area_over_limit == pytest.approx(cells[0] * cells[1] / 144)


def test_unaligned_patch_counts_its_partly_covered_cells():
    mask = np.zeros((H, W), bool)
    mask[:45, :70] = True                       # 34 % of the screen, not on cell edges
    rep = _run(_flicker(10, 0.0, 200.0, mask=mask))
    assert rep.verdict == "hazard"


@pytest.mark.parametrize("hz, flashes, verdict", [(3, 3, "warn"), (5, 5, "hazard")])
def test_rate_limit_three_flashes_a_second(hz, flashes, verdict):
    # BT.1702 (from memory): more than 3 flashes in any 1 s is a hazard; 3 is at the limit
    rep = _run(_flicker(hz, 0.0, 200.0, seconds=4.0))
    assert rep.max_flashes_per_s == flashes
    assert rep.verdict == verdict


@pytest.mark.parametrize("lo, hi, hazard", [
    (170.0, 200.0, False),      # darker level not below 160 cd/m²
    (150.0, 200.0, True),       # darker level below 160 cd/m²
    (100.0, 119.0, False),      # change under 20 cd/m²
    (100.0, 121.0, True),       # change over 20 cd/m²
])
def test_luminance_thresholds_of_a_general_flash(lo, hi, hazard):
    rep = _run(_flicker(10, lo, hi))
    assert (rep.verdict == "hazard") is hazard, rep


def test_saturated_red_flash_counts_separately():
    # saturated red alternating with a grey of the same luminance: no general flash,
    # but a red one (R/(R+G+B) = 1 >= 0.8, (R−G−B)·320 changes by 320 > 20)
    red = rgb_frame(np.broadcast_to([1.0, 0.0, 0.0], (H, W, 3)), space="ypbpr")
    grey = _grey(grey_for_luminance(0.2126 * 200.0))
    rep = _run(red if _square(k, 10) else grey for k in range(90))
    assert rep.max_flashes_per_s == 0
    assert rep.max_red_flashes_per_s == 10
    assert rep.verdict == "hazard"


def test_desaturated_red_is_not_a_red_flash():
    # R′G′B′ (1, 0.6, 0.6): linear R/(R+G+B) = 1/(1 + 2·0.6^2.4) ≈ 0.63 < 0.8
    pink = rgb_frame(np.broadcast_to([1.0, 0.6, 0.6], (H, W, 3)), space="ypbpr")
    lum = 200.0 * (0.2126 + 0.7874 * 0.6**2.4)
    grey = _grey(grey_for_luminance(lum))
    rep = _run(pink if _square(k, 10) else grey for k in range(90))
    assert rep.max_red_flashes_per_s == 0
    assert rep.verdict == "ok"


def test_rgb_frames_give_the_same_result_as_ypbpr():
    seq = [np.full((H, W, 3), 0.8 if _square(k, 6) else 0.1) for k in range(60)]
    a = FlashMeter(FPS, space="rgb", step=1)
    b = FlashMeter(FPS, space="ypbpr", step=1)
    for rgb in seq:
        fa = a.push(rgb_frame(rgb, space="rgb"))
        fb = b.push(rgb_frame(rgb, space="ypbpr"))
        assert fa.flashes == fb.flashes
        assert fa.mean_cd_m2 == pytest.approx(fb.mean_cd_m2, abs=LUT_CD_M2)
    assert a.report().verdict == b.report().verdict == "hazard"


def test_reset_forgets_and_window_follows_frame_rate():
    m = FlashMeter(29.97, step=1)
    assert m.window_frames == 30
    for p in _flicker(10, 0.0, 200.0, seconds=1.0):
        m.push(p)
    assert m.report().verdict == "hazard"
    m.reset()
    assert m.report().frames == 0 and m.report().verdict == "ok"


@pytest.mark.parametrize("kwargs, key", [
    (dict(fps=0), "fps"),
    (dict(fps=30, peak_white_cd_m2=-1), "peak_white"),
    (dict(fps=30, grid=(0, 4)), "grid"),
    (dict(fps=30, area_threshold=1.5), "area_threshold"),
    (dict(fps=30, space="lab"), "space"),
])
def test_bad_settings_name_the_argument(kwargs, key):
    with pytest.raises(ConfigError, match=key):
        FlashMeter(**kwargs)


def test_frame_smaller_than_grid_or_changing_size_is_refused():
    m = FlashMeter(FPS)
    with pytest.raises(ConfigError, match="grid"):
        m.push(np.zeros((3, 4, 4), np.float32))
    m.push(np.zeros((3, H, W), np.float32))
    with pytest.raises(ConfigError, match="planes"):
        m.push(np.zeros((3, H, W + 8), np.float32))
    m.reset()
    assert m.push(np.zeros((3, H, W + 8), np.float32)).index == 0
