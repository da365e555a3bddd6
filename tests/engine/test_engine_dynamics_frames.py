"""Line-rate dynamics on channel planes: edges ring as predicted, blanking is exact.

Planes are float32 (H, W) volts, zero-centred: Y′ 0…700 mV becomes −350…+350 mV,
so blanking (0 mV) sits at −0.35 V (SMPTE ST 274 analog levels, REFERENCES.md).
Pixel clock 74.25 MHz, 1920 active of 2200 samples per line (SMPTE ST 274).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from livecurve.engine.dynamics import StageDynamics, apply_line_filter, discretise

PIXEL_CLOCK_HZ = 74.25e6
T_PIX = 1.0 / PIXEL_CLOCK_HZ
WIDTH = 1920
LEAD_IN = 2200 - 1920
BLANK_V = -0.35
WHITE_V = 0.35

STAGES = {
    "pole": StageDynamics(gbw_hz=50e6, noise_gain=3.0),
    "resonance": StageDynamics(f0_hz=10e6, zeta=0.2),
    "pole+resonance+slew": StageDynamics(gbw_hz=80e6, noise_gain=2.0, slew_v_per_us=15.0,
                                         f0_hz=12e6, zeta=0.4),
    "ro_cl+slew": StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0,
                                ro_ohm=50.0, cl_f=530e-12),
    "slew only": StageDynamics(slew_v_per_us=10.0),
    "slew only+resonance": StageDynamics(slew_v_per_us=10.0, f0_hz=8e6, zeta=0.5),
}


def _edge_picture(h, edge_col):
    """Black left of *edge_col*, white from it on: a vertical edge in every row."""
    plane = np.full((h, WIDTH), BLANK_V, np.float32)
    plane[:, edge_col:] = WHITE_V
    return plane


def _ring_period_px(line, start, level, n_cross):
    """Mean spacing of the first *n_cross* crossings of *level* after *start*, ×2.

    Crossings are located by linear interpolation between samples; a least-squares
    line through (crossing number, position) gives the half period.
    """
    d = line[start:].astype(np.float64) - level
    idx = np.flatnonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)[:n_cross]
    assert idx.size == n_cross, f"only {idx.size} crossings found"
    pos = idx + d[idx] / (d[idx] - d[idx + 1])
    half = np.polyfit(np.arange(n_cross), pos, 1)[0]
    return 2.0 * half


@pytest.mark.parametrize("dyn, n_cross", [
    (StageDynamics(f0_hz=10e6, zeta=0.1), 14),
    # from components (TI SLOA013 model): Ro 50 Ω, C_L 2.12 nF, GBW 50 MHz, NG 3
    (StageDynamics.from_components(gbw_hz=50e6, r_f_ohm=2e3, r_g_ohm=1e3, ro_ohm=50.0,
                                   cl_f=2.12e-9), 8),
])
def test_vertical_edge_rings_with_the_damped_period(dyn, n_cross):
    # Underdamped second order rings at fd = f0·√(1 − ζ²) (control-theory texts), i.e.
    # every pixel_clock / fd pixels along the line.
    sec = dyn.sections[0]
    expected_px = PIXEL_CLOCK_HZ / (sec.f0_hz * math.sqrt(1.0 - sec.zeta ** 2))
    edge = 700
    h = 37  # not a multiple of the kernel's four-row groups
    out = apply_line_filter(_edge_picture(h, edge), discretise(dyn, T_PIX),
                            blank_level_v=BLANK_V, lead_in_samples=LEAD_IN)
    assert out.dtype == np.float32 and out.shape == (h, WIDTH)
    assert np.allclose(out, out[0], atol=1e-7, rtol=0)  # every row rings the same
    assert _ring_period_px(out[0], edge, WHITE_V, n_cross) == pytest.approx(expected_px,
                                                                             rel=2e-3)
    # before the edge the line stays at blanking exactly
    assert np.array_equal(out[:, :edge], np.full((h, edge), BLANK_V, np.float32))


def test_left_edge_steps_up_from_blanking():
    # A white field: the left edge of the picture is the step from blanking, so it
    # rings at the same predicted period as an edge inside the picture.
    dyn = StageDynamics(f0_hz=10e6, zeta=0.1)
    plane = np.full((5, WIDTH), WHITE_V, np.float32)
    out = apply_line_filter(plane, discretise(dyn, T_PIX), blank_level_v=BLANK_V,
                            lead_in_samples=LEAD_IN)
    expected_px = PIXEL_CLOCK_HZ / (10e6 * math.sqrt(1.0 - 0.01))
    assert _ring_period_px(out[2], 0, WHITE_V, 14) == pytest.approx(expected_px, rel=2e-3)
    assert out[2, 0] < WHITE_V and out[2].max() > WHITE_V        # rises, then overshoots
    assert abs(out[2, -1] - WHITE_V) < 1e-6                      # settled by the right edge


@pytest.mark.parametrize("name", list(STAGES))
@pytest.mark.parametrize("blank", [BLANK_V, 0.0, 0.1234])
def test_flat_field_at_blanking_is_unchanged_exactly(name, blank):
    plane = np.full((9, WIDTH), blank, np.float32)
    out = apply_line_filter(plane, discretise(STAGES[name], T_PIX), blank_level_v=blank,
                            lead_in_samples=LEAD_IN)
    assert out.dtype == np.float32
    assert np.array_equal(out, plane)


def test_flat_field_at_blanking_exact_with_bilinear_too():
    plane = np.full((6, WIDTH), BLANK_V, np.float32)
    lf = discretise(STAGES["resonance"], T_PIX, method="bilinear")
    assert np.array_equal(apply_line_filter(plane, lf, blank_level_v=BLANK_V), plane)


@pytest.mark.parametrize("name", list(STAGES))
def test_rows_are_filtered_independently(name):
    # Rows are processed four at a time; each must come out as if filtered alone.
    rng = np.random.default_rng(3)
    plane = rng.uniform(-0.35, 0.35, (7, 600)).astype(np.float32)
    lf = discretise(STAGES[name], T_PIX)
    whole = apply_line_filter(plane, lf, blank_level_v=BLANK_V)
    for i in range(plane.shape[0]):
        alone = apply_line_filter(plane[i:i + 1], lf, blank_level_v=BLANK_V)[0]
        assert np.allclose(whole[i], alone, atol=1e-7, rtol=0)


@pytest.mark.parametrize("name", list(STAGES))
def test_explicit_lead_in_changes_nothing(name):
    # Running the 280 blanking samples of the line (SMPTE ST 274: 2200 − 1920)
    # before the active picture leaves the blanking steady state untouched, so
    # the result equals skipping them.
    rng = np.random.default_rng(5)
    active = rng.uniform(-0.35, 0.35, (6, 500)).astype(np.float32)
    with_lead = np.concatenate([np.full((6, LEAD_IN), BLANK_V, np.float32), active], axis=1)
    lf = discretise(STAGES[name], T_PIX)
    a = apply_line_filter(active, lf, blank_level_v=BLANK_V, lead_in_samples=LEAD_IN)
    b = apply_line_filter(with_lead, lf, blank_level_v=BLANK_V)[:, LEAD_IN:]
    assert np.array_equal(a, b)


@pytest.mark.parametrize("name, tol_v", [("pole", 2e-7), ("resonance", 2e-7),
                                         ("slew only", 2e-7), ("ro_cl+slew", 1e-4)])
def test_shifting_signal_and_blanking_together_shifts_the_output(name, tol_v):
    # Time-invariant circuit, DC gain 1: moving the whole line (blanking included)
    # by a constant moves the output by that constant.  Rounding the shifted input
    # to float32 moves it by ~1e-8 V; where a several-state stage changes between
    # slewing and linear inside a pixel, the switch time sits on a T/32 grid, so
    # such a nudge may move it by one grid step (a second-order effect, hence the
    # looser tolerance there).
    rng = np.random.default_rng(9)
    plane = rng.uniform(-0.35, 0.35, (4, 400)).astype(np.float32)
    lf = discretise(STAGES[name], T_PIX)
    base = apply_line_filter(plane, lf, blank_level_v=0.0)
    moved = apply_line_filter(plane + np.float32(0.25), lf, blank_level_v=0.25)
    assert np.allclose(moved - 0.25, base, atol=tol_v, rtol=0)


def test_dtype_layout_and_out_argument():
    rng = np.random.default_rng(11)
    frame = rng.uniform(-0.35, 0.35, (3, 8, 300))            # planar float64 frame
    lf = discretise(STAGES["pole+resonance+slew"], T_PIX)
    ref = apply_line_filter(frame[1].astype(np.float32), lf, blank_level_v=BLANK_V)
    assert ref.dtype == np.float32 and ref.flags.c_contiguous
    got = apply_line_filter(frame[1], lf, blank_level_v=BLANK_V)  # float64 view → float32
    assert got.dtype == np.float32 and np.array_equal(got, ref)
    strided = np.ascontiguousarray(frame[1].astype(np.float32).T).T   # Fortran-ordered
    assert np.array_equal(apply_line_filter(strided, lf, blank_level_v=BLANK_V), ref)
    plane = frame[1].astype(np.float32)
    res = apply_line_filter(plane, lf, blank_level_v=BLANK_V, out=plane)  # in place
    assert res is plane and np.array_equal(plane, ref)


def test_stage_without_dynamics_is_the_identity():
    # No GBW, slew or resonance: the line passes bit for bit (no shift, no rounding).
    rng = np.random.default_rng(13)
    plane = rng.uniform(-0.35, 0.35, (6, 333)).astype(np.float32)
    lf = discretise(StageDynamics(), T_PIX)
    assert lf.n_blocks == 0
    assert np.array_equal(apply_line_filter(plane, lf, blank_level_v=BLANK_V), plane)
