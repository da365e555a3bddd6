"""Fused tables against the DC solver they are built from.

A table records the worst linear-interpolation error it measured at the mid-points of
its grid (livecurve.engine.tables).  Here the per-pixel kernels are checked against the
solver at random points (and at the domain ends): the error must stay within that
recorded bound plus the float32 evaluation slack.  For a curve with a kink inside one
grid interval the mid-point error understates the worst error by up to 2× (a kink at
fraction t of an interval of slope change s·h errs s·h·t(1−t) there but s·h·t/2 at the
mid-point), so a table that could not reach its target is held to twice its bound.

float32 slack: pixel volts and the grid position are IEEE 754 binary32 (24-bit
mantissa), so a point is off by up to |slope|·(|x| + span)·2⁻²², plus 1 µV of output
rounding — invented tolerance, stated here once.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.circuit.chain import ChainModel
from livecurve.circuit.devices import DiodeModel
from livecurve.circuit.netlist import solve_sweep
from livecurve.circuit.stages import KINDS, build_stage
from livecurve.config.chainfile import load_chain
from livecurve.engine.pipeline import FrameEngine
from livecurve.engine.tables import TARGET_ERR_V, apply_table, build_table_1d, build_table_2d
from tests.circuit._random_stages import OP, stages

CONFIGS = sorted((Path(__file__).resolve().parents[2] / "configs").glob("*.toml"))
OUT_SLACK_V = 1e-6


def _slack(table, x, c=None):
    """Per-point float32 slack: |local slope| · (|x| + span) · 2⁻²² + output rounding."""
    vals = table.values if not table.is_2d else table.values.max(axis=1)
    step = (table.hi_v - table.lo_v) / (table.n - 1)
    slope = np.abs(np.diff(vals.astype(np.float64))).max() / step
    if table.is_2d:
        slope = max(slope, np.abs(np.diff(table.values.astype(np.float64), axis=0)).max() / step)
    return slope * (np.abs(x) + (table.hi_v - table.lo_v) + abs(table.lo_v)) * 2.0 ** -22 \
        + OUT_SLACK_V


def _random_points(seed, lo, hi, n=4000):
    rng = np.random.default_rng(seed)
    x = np.concatenate([[lo, hi], rng.uniform(lo, hi, n)]).astype(np.float32)
    return np.sort(x)


def _allowed(table):
    return table.err_v if table.err_v <= TARGET_ERR_V else 2.0 * table.err_v


@pytest.mark.parametrize("kind", list(KINDS))
def test_table_1d_matches_solver(kind):
    @settings(max_examples=12, deadline=None)
    @given(stage=stages(kind), seed=st.integers(0, 2**32 - 1))
    def check(stage, seed):
        def fn(v):
            return solve_sweep(stage.net, v, t_kelvin=300.15)

        table = build_table_1d(fn, stage.lo_v, stage.hi_v)
        assert table.values.dtype == np.float32 and table.values.flags.c_contiguous
        x = _random_points(seed, stage.lo_v, stage.hi_v)
        ref = fn(x.astype(np.float64))
        got = apply_table(x[None, :], table)[0].astype(np.float64)
        err = np.abs(got - ref)
        assert np.all(err <= _allowed(table) + _slack(table, x)), (
            f"{kind} {stage.params}: worst {err.max() * 1e6:.2f} µV vs recorded bound "
            f"{table.err_v * 1e6:.2f} µV")
        # the ends of the domain give the end values exactly (inputs beyond clamp to them)
        ends = apply_table(np.array([[stage.lo_v - 1, stage.lo_v, stage.hi_v, stage.hi_v + 1]],
                                    dtype=np.float32), table)[0]
        np.testing.assert_array_equal(ends, table.values[[0, 0, -1, -1]])

    check()


@settings(max_examples=300, deadline=None)
@given(lo=st.floats(-3.0, 1.0), span=st.floats(0.01, 4.0),
       shape=st.tuples(st.floats(-3, 3), st.floats(-5, 5), st.floats(-3, 3)))
def test_table_ends_are_exact(lo, span, shape):
    """Inputs at or beyond either end of the domain read the end values exactly (1-D, and
    2-D per row and per pixel at the low control end, where the control weight is 0 and
    the control axis adds no rounding), for any float32 rounding of the domain ends.  Hypothesis
    searches freely (no fixed seed): before the kernel decided the top end on x itself,
    about one random table in ten came out one float32 step off at hi_v."""
    a, b, k = shape
    hi = lo + span
    t1 = build_table_1d(lambda v: a * np.tanh(b * v) + k * v, lo, hi)
    x = np.array([[lo - 1, lo, hi, hi + 1]], dtype=np.float32)
    np.testing.assert_array_equal(apply_table(x, t1)[0], t1.values[[0, 0, -1, -1]])
    # ends, not accuracy, are under test here: a 1 mV goal keeps the steepest random surfaces
    # inside the 2-D build's work bound (engine.tables.MAX_SOLVES_2D)
    t2 = build_table_2d(lambda v, c: a * np.tanh(b * c * v) + k * v, lo, hi, 0.5, 2.0,
                        target_v=1e-3)
    want = t2.by_control()[0, [0, 0, -1, -1]]  # end values of the low control curve
    for ctl in (np.array([0.5]), np.full((1, 4), 0.5)):
        np.testing.assert_array_equal(apply_table(x, t2, control=ctl)[0], want)


def test_table_1d_reaches_target_on_smooth_stages():
    """Smooth stages reach the 0.05 mV target; a near-step (anti-parallel junctions with no
    feedback resistor, so only A_ol limits the gain at zero) cannot, and says so.

    A stage whose output runs into the op-amp's swing limit inside the sweep is not
    smooth: once the output stops, the loop opens and the slope drops from the closed-loop
    gain to zero within microvolts (a clip, as on the bench).  Such stages record their
    larger bound honestly and are counted apart."""
    swing = OP.v_pos_v - OP.headroom_v, OP.v_neg_v + OP.headroom_v
    smooth = []

    @settings(max_examples=15, deadline=None, derandomize=True)
    @given(stage=stages("log_transdiode") | stages("soft_limiter") | stages("breakpoint_shaper"))
    def check(stage):
        t = build_table_1d(lambda v: solve_sweep(stage.net, v, t_kelvin=300.15), stage.lo_v,
                           stage.hi_v)
        clipped = (t.values.max() > swing[0] - 1e-3) or (t.values.min() < swing[1] + 1e-3)
        if clipped:
            assert t.err_v > 0.0
            return
        smooth.append(stage.kind)
        assert t.err_v <= TARGET_ERR_V, (stage.kind, stage.params, t.err_v, t.n)

    check()
    assert len(smooth) >= 10, smooth
    step = build_stage("log_bipolar", {"r_in": 10e3, "r_f": 0.0}, DiodeModel(), OP)
    t = build_table_1d(lambda v: solve_sweep(step, v, t_kelvin=300.15), -0.5, 0.5)
    assert t.err_v > TARGET_ERR_V


def test_table_2d_matches_solver():
    """2-D table over input volts × reference current of a log stage (per pixel and per row)."""
    dev = DiodeModel(is_a=1e-14, n=1.05, rs_ohm=2.0)

    def fn(v, i_ref):
        net = build_stage("log_transdiode", {"r_in": 10e3, "i_ref": i_ref}, dev, OP)
        return solve_sweep(net, v, t_kelvin=300.15)

    c_lo, c_hi = 60e-6, 200e-6  # the junction conducts over the whole ±0.5 V sweep
    table = build_table_2d(fn, -0.5, 0.5, c_lo, c_hi)
    assert table.is_2d and table.values.dtype == np.float32
    assert table.err_v <= TARGET_ERR_V
    rng = np.random.default_rng(7)
    x = _random_points(1, -0.5, 0.5, 600)
    c = np.concatenate([[c_lo, c_hi], rng.uniform(c_lo, c_hi, 14)])
    # one row per control value (line-time modulation) and the same as a per-pixel plane
    plane = np.ascontiguousarray(np.broadcast_to(x, (c.size, x.size)))
    rows = apply_table(plane, table, control=c)
    pixels = apply_table(plane, table, control=np.broadcast_to(c[:, None], plane.shape))
    np.testing.assert_allclose(rows, pixels, atol=1e-6)
    for j, cj in enumerate(c):
        ref = fn(x.astype(np.float64), cj)
        err = np.abs(rows[j] - ref)
        assert np.all(err <= table.err_v + _slack(table, x)), (cj, err.max())


# ---- the demo chains -----------------------------------------------------------------
@pytest.fixture(scope="module", params=CONFIGS, ids=[p.stem for p in CONFIGS])
def spec(request):
    return load_chain(request.param)


def _check_engine_runs(engine, seed):
    model = ChainModel(engine.spec)
    rng = np.random.default_rng(seed)
    for ch in range(3):
        for run in engine.runs[ch]:
            t = run.table
            x = _random_points(seed + ch, run.lo_v, run.hi_v, 800)
            if run.knob is None:
                got = apply_table(x[None, :], t)[0]
                ref = model.transfer(ch, x.astype(np.float64), stages=run.stages,
                                     live=engine.state.live)
                assert np.all(np.abs(got - ref) <= t.err_v + _slack(t, x)), (ch, run.stages)
                continue
            ls = engine.spec.live[run.knob]
            for cv in np.concatenate([[ls.lo, ls.hi], rng.uniform(ls.lo, ls.hi, 5)]):
                got = apply_table(x[None, :], t, control=np.array([cv]))[0]
                ref = model.transfer(ch, x.astype(np.float64), stages=run.stages,
                                     live={**engine.state.live, run.knob: cv})
                err = np.abs(got - ref)
                assert np.all(err <= t.err_v + _slack(t, x)), (run.knob, cv, err.max())


def test_demo_chain_tables_reach_target(spec):
    engine = FrameEngine(spec)
    _check_engine_runs(engine, 11)
    assert engine.worst_table_err_v <= TARGET_ERR_V, engine.summary_rows()


# Every demo chain's modulated 2-D table must reach the 0.05 mV goal.  (night_knee's knee
# current once stopped at 0.106 mV near its lowest current at the bottom of the sweep; the
# build now gives each axis half the target and the knob starts at 50 µA.)  A chain that
# cannot reach it goes in SHORTFALL with its measured figure, as a strict xfail.
SHORTFALL: dict = {}
MODULATED = [pytest.param(p, k, id=f"{p.stem}-{k}",
                          marks=[pytest.mark.xfail(strict=True, reason=SHORTFALL[(p.stem, k)])]
                          if (p.stem, k) in SHORTFALL else [])
             for p in CONFIGS for k in load_chain(p).live]


@functools.cache
def _modulated_engine(config, knob):
    engine = FrameEngine(load_chain(config), modulated=[knob])
    assert any(r.knob == knob for rs in engine.runs for r in rs)
    return engine


@pytest.mark.parametrize("config, knob", [(p, k) for p in CONFIGS for k in load_chain(p).live],
                         ids=[f"{p.stem}-{k}" for p in CONFIGS for k in load_chain(p).live])
def test_demo_chain_modulated_tables_match_solver(config, knob):
    _check_engine_runs(_modulated_engine(config, knob), 23)


@pytest.mark.parametrize("config, knob", MODULATED)
def test_demo_chain_modulated_tables_reach_target(config, knob):
    engine = _modulated_engine(config, knob)
    assert engine.worst_table_err_v <= TARGET_ERR_V, (knob, engine.summary_rows())
