"""Line-rate dynamics: models and discretisation against published formulas and scipy.

Reference sources are named beside each check; see /work/shared/REFERENCES.md.
Timing: 1080p30, 74.25 MHz pixel clock (SMPTE ST 274).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import integrate, signal
from scipy.linalg import expm

from livecurve.engine.dynamics import (
    StageDynamics,
    apply_line_filter,
    bandwidth_3db_hz,
    discretise,
    overshoot_fraction,
    pack_block,
    rise_time_s,
    step_response,
    summary,
)
from livecurve.engine.linefilters import K_SLEW, K_STEP, N_GRID, LineFilter
from livecurve.errors import ConfigError, MediaError

#: 1080p30 pixel period, s (74.25 MHz, SMPTE ST 274).
T_PIX = 1.0 / 74.25e6
#: Tolerance on filtered volts against scipy references: float32 output rounding
#: of a ±0.35 V signal is ~3e-8 V.
TOL_V = 1e-6


def _cascade_tf(dyn):
    """Continuous transfer function of all sections, as (num, den) in s."""
    num, den = np.array([1.0]), np.array([1.0])
    for sec in dyn.sections:
        n, d = sec.transfer_function()
        num, den = np.polymul(num, n), np.polymul(den, d)
    return num, den


def _held_levels(n, seed):
    """Piecewise-constant test line: random levels in ±0.35 V held 1–12 pixels."""
    rng = np.random.default_rng(seed)
    u = np.empty(n)
    j = 0
    while j < n:
        run = int(rng.integers(1, 13))
        u[j:j + run] = rng.uniform(-0.35, 0.35)
        j += run
    u[:3] = 0.0  # starts at blanking (0 V here), like lsim's zero initial state
    return u


LINEAR_CASES = {
    "pole": StageDynamics(gbw_hz=50e6, noise_gain=3.0),
    "resonance": StageDynamics(f0_hz=10e6, zeta=0.3),
    "pole+resonance": StageDynamics(gbw_hz=120e6, noise_gain=2.0, f0_hz=18e6, zeta=0.6),
    "ro_cl": StageDynamics.from_components(gbw_hz=50e6, r_f_ohm=2e3, r_g_ohm=1e3,
                                           ro_ohm=50.0, cl_f=530e-12),
    "overdamped": StageDynamics(f0_hz=5e6, zeta=1.7),
}


# ---------------------------------------------------------------- second-order step


@pytest.mark.parametrize("zeta", [0.3, 0.5, 0.707])
def test_second_order_overshoot_matches_closed_form(zeta):
    # Peak overshoot exp(−ζπ/√(1−ζ²)): control-theory texts (REFERENCES.md).
    # f0 = 1 MHz is sampled ~74× per cycle, so the sampled peak is within ~1e-4.
    dyn = StageDynamics(f0_hz=1e6, zeta=zeta)
    expected = math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta * zeta))
    got = overshoot_fraction(dyn, pixel_period_s=T_PIX)
    assert got == pytest.approx(expected, abs=2e-4)


def test_overshoot_reference_values():
    # REFERENCES.md: ζ = 0.5 → 16.3 %, ζ = 0.707 → 4.3 % (control-theory texts).
    assert round(overshoot_fraction(StageDynamics(f0_hz=1e6, zeta=0.5),
                                    pixel_period_s=T_PIX), 3) == 0.163
    assert round(overshoot_fraction(StageDynamics(f0_hz=1e6, zeta=0.707),
                                    pixel_period_s=T_PIX), 3) == 0.043


@pytest.mark.parametrize("zeta", [0.2, 0.5, 0.707, 1.0, 2.0])
def test_second_order_3db_matches_analytic(zeta):
    # −3 dB frequency of ω0²/(s² + 2ζω0 s + ω0²):
    # f3dB = f0·√(1 − 2ζ² + √((1 − 2ζ²)² + 1)) (control-theory texts; from memory,
    # and cross-checked here with scipy.signal.freqs below).
    f0 = 1e6
    dyn = StageDynamics(f0_hz=f0, zeta=zeta)
    x = 1.0 - 2.0 * zeta * zeta
    analytic = f0 * math.sqrt(x + math.sqrt(x * x + 1.0))
    w0 = 2 * math.pi * f0
    _, h = signal.freqs([w0 * w0], [1.0, 2 * zeta * w0, w0 * w0], worN=[2 * math.pi * analytic])
    assert abs(h[0]) == pytest.approx(math.sqrt(0.5), rel=1e-9)      # scipy agrees
    assert dyn.bandwidth_3db_hz == pytest.approx(analytic, rel=1e-9)  # continuous model
    # The discrete filter at 74.25 MHz differs from the continuous one only slightly
    # at 1 MHz (ZOH aliasing is small so far below the pixel clock).
    assert bandwidth_3db_hz(dyn, pixel_period_s=T_PIX) == pytest.approx(analytic, rel=1e-3)


def test_closed_loop_pole_bandwidth_is_gbw_over_noise_gain():
    # f3dB = GBW / (1 + Rf/Rg): any op-amp text (REFERENCES.md "Op-amp dynamics").
    dyn = StageDynamics.from_components(gbw_hz=50e6, r_f_ohm=2e3, r_g_ohm=1e3)
    assert dyn.noise_gain == pytest.approx(3.0)
    assert dyn.bandwidth_3db_hz == pytest.approx(50e6 / 3.0, rel=1e-9)
    # Far below the pixel clock the discrete filter keeps the same corner.
    slow = StageDynamics(gbw_hz=3e6, noise_gain=3.0)
    assert bandwidth_3db_hz(slow, pixel_period_s=T_PIX) == pytest.approx(1e6, rel=1e-3)


def test_first_order_rise_time():
    # 10–90 % rise of a first-order low-pass: ln(9)·τ ≈ 2.2τ (common practice).
    # τ = 20 pixel periods so that interpolation between samples is fine enough.
    k = 1.0 / (20 * T_PIX)
    dyn = StageDynamics(gbw_hz=k / (2 * math.pi), noise_gain=1.0)
    assert rise_time_s(dyn, pixel_period_s=T_PIX) == pytest.approx(math.log(9.0) / k, rel=1e-2)


def test_summary_collects_the_stage_figures():
    dyn = StageDynamics.from_components(gbw_hz=50e6, r_f_ohm=2e3, r_g_ohm=1e3, ro_ohm=50.0,
                                        cl_f=530e-12)
    got = summary(dyn, pixel_period_s=T_PIX)
    assert got["bandwidth_3db_hz"] == bandwidth_3db_hz(dyn, pixel_period_s=T_PIX)
    assert got["bandwidth_3db_hz_continuous"] == dyn.bandwidth_3db_hz
    assert got["overshoot_fraction"] == overshoot_fraction(dyn, pixel_period_s=T_PIX,
                                                           step_v=0.7)
    # ζ = 0.30 → 37 % overshoot (closed form above); sampled at 7.5 px per ring
    # period the largest sample sits a little below the continuous peak
    assert 0.30 < got["overshoot_fraction"] <= 0.372
    assert 0 < got["rise_time_s"] < 3 * T_PIX and 0 < got["memory_samples"] < 280
    assert len(got["sections"]) == 1


# ---------------------------------------------------------------- against scipy


@pytest.mark.parametrize("name", list(LINEAR_CASES))
def test_zoh_filter_matches_lsim(name):
    # The discrete filter is the exact ZOH equivalent: the same held input through
    # scipy.signal.lsim (interp=False, i.e. zero-order hold) of the continuous
    # model.  Our sample n is the output at the end of pixel n, lsim's n + 1.
    dyn = LINEAR_CASES[name]
    n = 600
    u = _held_levels(n + 1, seed=len(name))
    t = np.arange(n + 1) * T_PIX
    _, y_ref, _ = signal.lsim(_cascade_tf(dyn), u, t, interp=False)
    lf = discretise(dyn, T_PIX)
    y = apply_line_filter(u[None, :n].astype(np.float32), lf, blank_level_v=0.0)[0]
    # inputs were rounded to float32 before filtering: feed lsim the same values
    _, y_ref32, _ = signal.lsim(_cascade_tf(dyn), u.astype(np.float32).astype(np.float64), t,
                                interp=False)
    assert np.max(np.abs(y - y_ref32[1:])) < TOL_V
    assert np.max(np.abs(y_ref - y_ref32)) < 1e-6  # rounding the input barely matters


@pytest.mark.parametrize("name", list(LINEAR_CASES))
def test_bilinear_filter_matches_scipy_bilinear_lfilter(name):
    # method="bilinear" is Tustin's transform: scipy.signal.bilinear + lfilter.
    dyn = LINEAR_CASES[name]
    n = 600
    u = _held_levels(n, seed=7 + len(name)).astype(np.float32).astype(np.float64)
    b, a = signal.bilinear(*_cascade_tf(dyn), fs=1.0 / T_PIX)
    y_ref = signal.lfilter(b, a, u)
    lf = discretise(dyn, T_PIX, method="bilinear")
    y = apply_line_filter(u[None, :].astype(np.float32), lf, blank_level_v=0.0)[0]
    assert np.max(np.abs(y - y_ref)) < TOL_V


def test_zoh_poles_are_exp_st_and_bilinear_poles_are_warped():
    # ZOH maps each analog pole s to z = exp(sT); Tustin maps it to
    # (1 + sT/2)/(1 − sT/2) (standard properties of the two transforms).  A 10 MHz
    # resonance at 74.25 MHz therefore rings ~5 % slower under Tustin.
    zeta, w0 = 0.05, 2 * math.pi * 10e6
    s_poles = np.roots([1.0, 2 * zeta * w0, w0 * w0])
    dyn = StageDynamics(f0_hz=10e6, zeta=zeta)

    def poles(method):
        phi = discretise(dyn, T_PIX, method=method).block(0)["phi"]
        return np.sort_complex(np.linalg.eigvals(phi))

    z_zoh, z_bil = poles("zoh"), poles("bilinear")
    assert np.allclose(z_zoh, np.sort_complex(np.exp(s_poles * T_PIX)), atol=1e-12)
    tustin = (1 + s_poles * T_PIX / 2) / (1 - s_poles * T_PIX / 2)
    assert np.allclose(z_bil, np.sort_complex(tustin), atol=1e-12)
    ring_zoh = abs(np.angle(z_zoh[0])) / T_PIX
    ring_bil = abs(np.angle(z_bil[0])) / T_PIX
    assert ring_zoh == pytest.approx(w0 * math.sqrt(1 - zeta * zeta), rel=1e-9)
    assert ring_bil / ring_zoh < 0.95


# ---------------------------------------------------------------- slew rate


def test_pure_slew_limit_reaches_end_after_step_over_slew_rate():
    # Slew rate = largest dV/dt (definition, common practice): a 0.7 V step at
    # 10 V/µs takes 70 ns, ± one pixel period on the sampled line.
    sr = 10.0  # V/µs
    step = 0.7
    y = step_response(StageDynamics(slew_v_per_us=sr), pixel_period_s=T_PIX, n=40, step_v=step)
    t_end = (np.flatnonzero(np.abs(y - step) < 1e-6)[0] + 1) * T_PIX
    assert abs(t_end - step / (sr * 1e6)) <= T_PIX
    ramp = np.diff(np.concatenate(([0.0], y)))[:4]
    assert np.allclose(ramp, sr * 1e6 * T_PIX, rtol=1e-6)   # full rate while slewing


def test_slew_with_bandwidth_follows_large_signal_step():
    # Single-pole op-amp, large step: ramps at SR until the error is SR/k, then
    # settles as exp(−k·t) (textbook large-signal step response, from memory;
    # the same mechanism is checked against ngspice in test_engine_dynamics_ngspice).
    gbw, ng, sr_v_per_us, step = 50e6, 3.0, 10.0, 0.7
    k = 2 * math.pi * gbw / ng
    sr = sr_v_per_us * 1e6
    e_lin = sr / k
    t1 = (step - e_lin) / sr                          # end of the slewing part, s
    dyn = StageDynamics(gbw_hz=gbw, noise_gain=ng, slew_v_per_us=sr_v_per_us)
    n = 40
    y = step_response(dyn, pixel_period_s=T_PIX, n=n, step_v=step)
    t = (np.arange(n) + 1) * T_PIX
    expected = np.where(t < t1, sr * t, step - e_lin * np.exp(-k * (t - t1)))
    assert np.max(np.abs(y - expected)) < 1e-6
    slewing = np.flatnonzero(np.abs(np.diff(np.concatenate(([0.0], y))) - sr * T_PIX) < 1e-6)
    t_slew_end = (slewing[-1] + 1) * T_PIX
    assert abs(t_slew_end - t1) <= T_PIX


def test_small_steps_do_not_slew_and_large_steps_are_symmetric():
    lin = StageDynamics(gbw_hz=50e6, noise_gain=3.0)
    slewed = StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=10.0)
    small = 0.05  # below SR/k = 95 mV: the input stage never saturates
    a = step_response(lin, pixel_period_s=T_PIX, n=30, step_v=small)
    b = step_response(slewed, pixel_period_s=T_PIX, n=30, step_v=small)
    assert np.max(np.abs(a - b)) < 1e-8
    up = step_response(slewed, pixel_period_s=T_PIX, n=30, step_v=0.7)
    down = step_response(slewed, pixel_period_s=T_PIX, n=30, step_v=-0.7)
    assert np.array_equal(up, -down)


def test_slew_limit_acts_above_full_power_bandwidth_only():
    # Full-power bandwidth f = SR/(2π·Vpeak) (common practice): at 10 V/µs and
    # 0.35 V peak it is 4.5 MHz.  A 3 MHz sine passes at full amplitude (the
    # 300 MHz pole barely touches it); a 10 MHz sine is cut down.  The output
    # never moves faster than SR (definition of slew rate).
    sr_v_per_us, vpeak = 10.0, 0.35
    fpbw = sr_v_per_us * 1e6 / (2 * math.pi * vpeak)
    dyn = StageDynamics(gbw_hz=300e6, noise_gain=1.0, slew_v_per_us=sr_v_per_us)
    lf = discretise(dyn, T_PIX)
    t = np.arange(3000) * T_PIX

    def through(f):
        u = (vpeak * np.sin(2 * math.pi * f * t)).astype(np.float32)[None, :]
        return apply_line_filter(u, lf, blank_level_v=0.0)[0, 1000:]

    below, above = through(3e6), through(10e6)
    assert 3e6 < fpbw < 10e6
    assert np.abs(below).max() > 0.99 * vpeak
    assert np.abs(above).max() < 0.85 * vpeak
    for y in (below, above):
        assert np.abs(np.diff(y)).max() <= sr_v_per_us * 1e6 * T_PIX * (1 + 1e-6)


def _nonlinear_reference(dyn, u):
    """Continuous model of a stage with its slew limit, integrated by scipy.

    States as in the dynamics module: the first state's derivative is clipped to
    ±SR; each pixel's held input is integrated over its period with DOP853.
    Returns the output at the end of every pixel.
    """
    secs = dyn.sections
    mats = [sec.state_space() for sec in secs]
    n = sum(m[0].shape[0] for m in mats)
    a_all, b_all = np.zeros((n, n)), np.zeros(n)
    off, prev = 0, None
    for a, b, c, _ in mats:
        m = a.shape[0]
        a_all[off:off + m, off:off + m] = a
        if prev is None:
            b_all[off:off + m] = b[:, 0]
        else:
            a_all[off:off + m, prev[0]:prev[0] + prev[1].size] += np.outer(b[:, 0], prev[1])
        prev = (off, c[0])
        off += m
    sr = secs[0].slew_v_per_s

    def rhs(_t, x, uu):
        dx = a_all @ x + b_all * uu
        dx[0] = min(max(dx[0], -sr), sr)
        return dx

    x = np.zeros(n)
    out = np.empty(u.size)
    for j, uu in enumerate(u):
        sol = integrate.solve_ivp(rhs, (0.0, T_PIX), x, args=(uu,), method="DOP853",
                                  rtol=1e-11, atol=1e-13)
        x = sol.y[:, -1]
        out[j] = x[-1]
    return out


@pytest.mark.parametrize("dyn, tol_v", [
    (StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0, ro_ohm=50.0,
                   cl_f=530e-12), 2e-4),
    (StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0, f0_hz=12e6,
                   zeta=0.35), 2e-4),
    (StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0), TOL_V),
])
def test_rate_limited_stage_matches_scipy_integration(dyn, tol_v):
    # Reference: scipy.integrate.solve_ivp (DOP853, rtol 1e-11) of the same
    # continuous model with the clipped derivative.  Large held steps make the
    # stage enter and leave slewing many times.  Several states: a change of mode
    # inside a pixel is put on a T/32 grid (linefilters.N_GRID), measured error
    # ~6e-5 V.  One state: solved exactly (linefilters eq. 4).
    u = (_held_levels(120, seed=21) * 2.0).astype(np.float32)   # ±0.7 V steps
    ref = _nonlinear_reference(dyn, u.astype(np.float64))
    y = apply_line_filter(u[None, :], discretise(dyn, T_PIX), blank_level_v=0.0)[0]
    assert np.max(np.abs(y - ref)) < tol_v


def test_general_path_matches_scipy_integration():
    # The same reference for the kernel's general path (bisection on mode changes).
    dyn, reordered = _reordered_filter()
    u = (_held_levels(120, seed=21) * 2.0).astype(np.float32)
    ref = _nonlinear_reference(dyn, u.astype(np.float64))
    y = apply_line_filter(u[None, :], reordered, blank_level_v=0.0)[0]
    assert np.max(np.abs(y - ref)) < 2e-4


def _maps(a, b, t):
    """ZOH maps [Φ | Γ] and, with state 0 held at a constant rate c, [Σx | Σu | Σc]."""
    n = a.shape[0]
    aug = np.zeros((n + 2, n + 2))
    aug[:n, :n], aug[:n, n] = a, b
    lin = expm(aug * t)[:n, :n + 1]
    aug[0, :] = 0.0
    aug[0, n + 1] = 1.0
    return lin, expm(aug * t)[:n, :]


def _reordered_filter():
    """A pole + resonance + slew stage and the same block with two states swapped.

    A state-space filter does not depend on how its states are numbered, but
    the swap sends the block through the kernel's general (array) path, which
    locates a change of mode inside a pixel by bisection, instead of its
    three-state fast path, which computes the slewing time of the one-state
    section exactly.  Both put the switch on a T/32 grid.
    """
    dyn = StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0, f0_hz=12e6, zeta=0.35)
    k = 2 * math.pi * 50e6 / 3.0
    w0, z = 2 * math.pi * 12e6, 0.35
    k2, p2 = w0 / (2 * z), 2 * z * w0
    a = np.array([[-k, 0.0, 0.0], [k2, 0.0, -k2], [0.0, p2, -p2]])
    b = np.array([k, 0.0, 0.0])
    c = np.array([0.0, 0.0, 1.0])
    perm = [0, 2, 1]
    a, b, c = a[np.ix_(perm, perm)], b[perm], c[perm]
    sr = 20e6
    lin, slw = _maps(a, b, T_PIX)
    grid = [_maps(a, b, T_PIX * m / N_GRID) for m in range(1, N_GRID)]
    row = pack_block(lin=lin, c=c, d=0.0, end_state=True, slew=(sr, slw),
                     dem=np.append(a[0], b[0]), e_slew_v=sr / k, step_v=sr * T_PIX,
                     lin_grid=[g[0] for g in grid], slw_grid=[g[1] for g in grid])
    return dyn, LineFilter(row[None, :], T_PIX, "zoh")


def test_reordered_states_give_the_same_line():
    dyn, reordered = _reordered_filter()
    small = (_held_levels(400, seed=4) * 0.2).astype(np.float32)[None, :]   # never slews
    large = (_held_levels(400, seed=4) * 2.0).astype(np.float32)[None, :]   # slews often
    for u, tol_v in ((small, 1e-7), (large, 3e-4)):
        fast = apply_line_filter(u, discretise(dyn, T_PIX), blank_level_v=0.0)
        general = apply_line_filter(u, reordered, blank_level_v=0.0)
        assert np.max(np.abs(fast - general)) < tol_v


# ---------------------------------------------------------------- component derivation


@pytest.mark.parametrize("ro, cl, ng", [(50.0, 530e-12, 3.0), (20.0, 100e-12, 1.0),
                                        (10.0, 1e-9, 5.0)])
def test_ro_cl_section_matches_closed_loop_of_single_pole_opamp(ro, cl, ng):
    # TI SLOA013: single-pole op-amp A(s) = A0/(1 + s/ωa) whose output resistance Ro
    # drives C_L inside the loop.  Closed-loop poles are the roots of
    # 1 + β·A(s)/(1 + s·Ro·C_L) = 0, computed numerically here for A0 = 1e6.
    gbw, a0 = 80e6, 1e6
    wa = 2 * math.pi * gbw / a0
    p = 1.0 / (ro * cl)
    beta = 1.0 / ng
    den = np.polyadd(np.polymul([1.0 / wa, 1.0], [1.0 / p, 1.0]), [beta * a0])
    poles = np.roots(den)
    w0 = math.sqrt(np.prod(poles).real)
    zeta = -np.sum(poles).real / (2 * w0)
    sec = StageDynamics(gbw_hz=gbw, noise_gain=ng, ro_ohm=ro, cl_f=cl).sections[0]
    assert sec.f0_hz == pytest.approx(w0 / (2 * math.pi), rel=1e-3)
    assert sec.zeta == pytest.approx(zeta, rel=1e-3)


def test_sections_order_and_kinds():
    dyn = StageDynamics(gbw_hz=50e6, noise_gain=2.0, slew_v_per_us=30.0, f0_hz=20e6, zeta=0.4)
    first, second = dyn.sections
    assert first.order == 1 and first.slew_v_per_s == pytest.approx(30e6)
    assert first.f0_hz == pytest.approx(25e6)
    assert second.order == 2 and second.slew_v_per_s is None
    assert (second.f0_hz, second.zeta) == (pytest.approx(20e6), pytest.approx(0.4))
    assert StageDynamics().sections == []
    assert discretise(StageDynamics(), T_PIX).n_blocks == 0


def test_memory_samples_bound_the_step_settling():
    dyn = StageDynamics(f0_hz=10e6, zeta=0.3)
    lf = discretise(dyn, T_PIX)
    m = lf.memory_samples(tol=1e-4)
    y = step_response(dyn, pixel_period_s=T_PIX, n=m + 50)
    # the mode envelope has decayed below tol; the response sits within a few tol
    assert np.max(np.abs(y[m:] - 1.0)) < 3e-4
    assert m < 280  # settles within the 1080p30 horizontal blanking (SMPTE ST 274)


# ---------------------------------------------------------------- whole knob range


@st.composite
def stages(draw):
    kw = {}
    if draw(st.booleans()):
        kw["gbw_hz"] = draw(st.floats(1e6, 1e9))
        kw["noise_gain"] = draw(st.floats(1.0, 10.0))
        if draw(st.booleans()):
            kw["ro_ohm"] = draw(st.floats(5.0, 200.0))
            kw["cl_f"] = draw(st.floats(1e-12, 5e-9))
    if draw(st.booleans()):
        kw["slew_v_per_us"] = draw(st.floats(5.0, 3000.0))
    if "ro_ohm" not in kw and draw(st.booleans()):
        kw["f0_hz"] = draw(st.floats(1e5, 3e7))
        kw["zeta"] = draw(st.floats(0.05, 3.0))
    return StageDynamics(**kw)


@settings(max_examples=30, deadline=None)
@given(dyn=stages(), level=st.floats(-0.7, 0.7), blank=st.floats(-0.35, 0.35))
def test_any_stage_has_unity_dc_gain_and_rests_at_blanking(dyn, level, blank):
    # Invariants of every stage: a line at blanking stays there bit for bit, and a
    # held level is reached in the end (the sections carry no DC gain).
    lf = discretise(dyn, T_PIX)
    n = _default_settle(lf, abs(level - blank))
    assume(n <= 20000)   # very lightly damped corners need longer lines than this
    line = np.full((2, n), blank, np.float32)
    line[1, 5:] = level
    out = apply_line_filter(line, lf, blank_level_v=blank)
    assert out.dtype == np.float32
    assert np.array_equal(out[0], line[0])
    assert abs(float(out[1, -1]) - float(np.float32(level))) < 1e-5


def _default_settle(lf, step_v):
    slew = sum(int(math.ceil(step_v / r[K_STEP])) for r in lf.coef if r[K_SLEW] > 0)
    return 2 * lf.memory_samples(tol=1e-7) + slew + 16


@settings(max_examples=20, deadline=None)
@given(sr=st.floats(2.0, 500.0), gbw=st.floats(1e6, 1e9), seed=st.integers(0, 2**31))
def test_slewing_output_never_moves_faster_than_the_slew_rate(sr, gbw, seed):
    # Definition of slew rate: |dV/dt| <= SR, so at most SR·T per pixel.
    dyn = StageDynamics(gbw_hz=gbw, slew_v_per_us=sr)
    u = (np.random.default_rng(seed).uniform(-0.7, 0.7, (1, 400))).astype(np.float32)
    y = apply_line_filter(u, discretise(dyn, T_PIX), blank_level_v=0.0)[0].astype(np.float64)
    steps = np.abs(np.diff(np.concatenate(([0.0], y))))
    assert steps.max() <= sr * 1e6 * T_PIX * (1 + 1e-6) + 1e-7


# ---------------------------------------------------------------- bad input


@pytest.mark.parametrize("kwargs, key", [
    ({"gbw_hz": -50e6}, "gbw_hz"),
    ({"gbw_hz": 0.0}, "gbw_hz"),
    ({"gbw_hz": float("nan")}, "gbw_hz"),
    ({"f0_hz": 10e6, "zeta": 0.0}, "zeta"),
    ({"f0_hz": 10e6, "zeta": -0.3}, "zeta"),
    ({"f0_hz": 10e6}, "zeta"),
    ({"zeta": 0.5}, "f0_hz"),
    ({"noise_gain": 0.5}, "noise_gain"),
    ({"slew_v_per_us": -1.0}, "slew_v_per_us"),
    ({"gbw_hz": 50e6, "ro_ohm": 50.0}, "cl_f"),
    ({"ro_ohm": 50.0, "cl_f": 1e-10}, "gbw_hz"),
    ({"gbw_hz": 50e6, "ro_ohm": 50.0, "cl_f": 1e-10, "f0_hz": 1e6, "zeta": 0.5}, "f0_hz"),
    ({"gbw_hz": "fast"}, "gbw_hz"),
])
def test_bad_parameters_raise_config_error(kwargs, key):
    with pytest.raises(ConfigError) as err:
        StageDynamics(**kwargs)
    assert err.value.key == key
    assert key in str(err.value)


def test_bad_discretisation_and_apply_arguments():
    dyn = StageDynamics(gbw_hz=50e6, slew_v_per_us=10.0)
    with pytest.raises(ConfigError, match="pixel_period_s"):
        discretise(dyn, 0.0)
    with pytest.raises(ConfigError, match="method"):
        discretise(dyn, T_PIX, method="euler")
    with pytest.raises(ConfigError, match="zoh"):
        discretise(dyn, T_PIX, method="bilinear")
    with pytest.raises(ConfigError, match="r_g_ohm"):
        StageDynamics.from_components(gbw_hz=50e6, r_f_ohm=1e3, r_g_ohm=-1.0)
    lf = discretise(dyn, T_PIX)
    with pytest.raises(ConfigError, match="planes_channel"):
        apply_line_filter(np.zeros((3, 4, 5), np.float32), lf, blank_level_v=0.0)
    with pytest.raises(ConfigError, match="lead_in_samples"):
        apply_line_filter(np.zeros((4, 5), np.float32), lf, blank_level_v=0.0,
                          lead_in_samples=-1)
    with pytest.raises(ConfigError, match="out"):
        apply_line_filter(np.zeros((4, 5), np.float32), lf, blank_level_v=0.0,
                          out=np.zeros((4, 5), np.float64))
    plane = np.zeros((9, 16), np.float32)
    plane[5, 3] = np.nan
    with pytest.raises(MediaError, match="first row 5"):
        apply_line_filter(plane, lf, blank_level_v=0.0)
    plane[5, 3] = np.inf
    with pytest.raises(MediaError):
        apply_line_filter(plane, lf, blank_level_v=0.0)
