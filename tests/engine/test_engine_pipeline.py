"""The per-frame engine (livecurve.engine.pipeline): runs, 2-D tables, knobs, dynamics, and
the table path against the solver path on real pictures.

References (see /work/shared/REFERENCES.md):
* Inverting amplifier, Vout = −(Rf/Rin)·Vin: any op-amp text (common practice).
* A linear stage with unity DC gain that sits at its rest level stays there: a step-free
  input excites no transient (common practice; any control-theory text).
* The DC solver the tables are built from is itself checked against ngspice in
  tests/circuit; here the tables and the per-pixel solver path must agree with it within the
  bound the table build measured, plus float32 rounding.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import load_chain
from livecurve.engine.frameflow import FrameFlow
from livecurve.engine.linefilters import apply_line_filter
from livecurve.engine.pipeline import FrameEngine
from livecurve.engine.tables import apply_table
from livecurve.errors import ConfigError
from livecurve.media.source import open_source
from livecurve.outputs.demo import DEMO_CHAINS, chain_path, demo_clip
from livecurve.signal.component import centre_offsets_v

#: float32 slack on volts near ±0.5 V: table values are stored in float32 (half an ulp of
#: 0.5 V is 3e-8 V) and the (bi)linear interpolation and the line filter's float32 output add
#: a few more ulps.  0.5 µV is ~15 ulps, still 100× below the 0.05 mV table target.
F32_SLACK_V = 5e-7

SPLIT_CHAIN = """
title = "split by a dynamic stage"
space = "rgb"
standard = "bt709"
[[stage]]
id = "pre"
kind = "inverting_gain"
r_in = "10k"
r_f = "12k"
[[stage]]
id = "soft"
kind = "soft_limiter"
r_in = "10k"
r_f = "10k"
r_k = "4.7k"
channels = {soft_channels}
[stage.device]
is = "1e-12"
n = 1.8
[stage.dynamics]
gbw = "80MHz"
slew = "300V/us"
[[stage]]
id = "post"
kind = "inverting_gain"
r_in = "10k"
r_f = "8.2k"
"""


def _write(tmp_path, text, name="chain.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return load_chain(p)


def _ids(runs):
    return [[s.id for s in r.stages] for r in runs]


# ------------------------------------------------------------------------ runs


def test_dynamic_stage_ends_its_run(tmp_path):
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0]"))
    eng = FrameEngine(spec)
    # channel 0: 'soft' has dynamics, so the run pre+soft ends there and 'post' starts anew
    assert _ids(eng.runs[0]) == [["pre", "soft"], ["post"]]
    assert eng.runs[0][0].line_filter is not None and eng.runs[0][1].line_filter is None
    # channels 1 and 2 do not carry 'soft': pre and post fuse into one table
    assert _ids(eng.runs[1]) == [["pre", "post"]]
    assert _ids(eng.runs[2]) == [["pre", "post"]]
    assert eng.runs[1][0].line_filter is None


def test_split_runs_keep_the_dc_transfer(tmp_path):
    # A flat field reaches the DC answer after the line filter settles: the composed runs
    # must equal the solver's whole-channel transfer (the split must not change DC).
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0, 1, 2]"))
    eng = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    levels = np.linspace(-0.3, 0.3, 7)
    planes = np.repeat(levels.astype(np.float32)[None, :, None], 3, axis=0)
    planes = np.ascontiguousarray(np.broadcast_to(planes, (3, 7, 400)))
    out = eng.process(planes)
    ref = ChainModel(spec).transfer_all(levels)
    bound = sum(r.table.err_v for r in eng.runs[0]) + F32_SLACK_V
    # the last column: 400 pixels at 74.25 MHz is 5.4 µs, > 100 time constants of the
    # 80 MHz / noise-gain-2 pole
    np.testing.assert_allclose(out[:, :, -1], ref, atol=bound, rtol=0)


KNOBS_ON_PRE_AND_POST = """
[live.pre_rf]
target = "pre.r_f"
min = "8k"
max = "16k"
[live.post_rf]
target = "post.r_f"
min = "6k"
max = "10k"
"""


def test_two_modulated_knobs_never_share_a_run(tmp_path):
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0]") + KNOBS_ON_PRE_AND_POST)
    eng = FrameEngine(spec, modulated=["pre_rf", "post_rf"])
    # channel 1: pre and post would fuse, but each carries its own modulated knob
    assert _ids(eng.runs[1]) == [["pre"], ["post"]]
    assert [r.knob for r in eng.runs[1]] == ["pre_rf", "post_rf"]
    assert all(r.table.is_2d for r in eng.runs[1])


def test_a_hand_turned_knob_never_shares_a_modulated_run(tmp_path):
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0]") + KNOBS_ON_PRE_AND_POST)
    eng = FrameEngine(spec, modulated=["pre_rf"])
    # channel 1: pre (modulated) and post (turned by hand) would fuse; they are kept apart
    assert _ids(eng.runs[1]) == [["pre"], ["post"]]
    assert [r.knob for r in eng.runs[1]] == ["pre_rf", None]
    assert eng.runs[1][0].table.is_2d and not eng.runs[1][1].table.is_2d
    # turning post_rf rebuilds post's 1-D table only: the 2-D table is the same object
    first = [rs[0].table for rs in eng.runs]
    eng.set_live("post_rf", 9e3)
    assert all(rs[0].table is t for rs, t in zip(eng.runs, first, strict=True))
    assert eng.runs[1][1].table is not None
    # with no knob modulated, the two stages fuse as before
    assert _ids(FrameEngine(spec).runs[1]) == [["pre", "post"]]


def test_kept_apart_runs_keep_the_dc_transfer(tmp_path):
    # the DC solver's whole-channel transfer (an independent reference: it never splits
    # the chain into tables) at the modulated knob's value and a turned knob
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0]") + KNOBS_ON_PRE_AND_POST)
    eng = FrameEngine(spec, modulated=["pre_rf"], pixel_period_s=1 / 74.25e6)
    eng.set_live("post_rf", 7.5e3)
    levels = np.linspace(-0.3, 0.3, 7)
    planes = np.repeat(levels.astype(np.float32)[None, :, None], 3, axis=0)
    planes = np.ascontiguousarray(np.broadcast_to(planes, (3, 7, 400)))
    out = eng.process(planes, controls={"pre_rf": 11e3})
    ref = ChainModel(spec).transfer_all(levels, live={"pre_rf": 11e3, "post_rf": 7.5e3})
    for ch in (1, 2):
        bound = sum(r.table.err_v for r in eng.runs[ch]) + F32_SLACK_V
        np.testing.assert_allclose(out[ch, :, -1], ref[ch], atol=bound, rtol=0)


def test_unknown_modulated_knob_is_refused(tmp_path):
    spec = _write(tmp_path, SPLIT_CHAIN.format(soft_channels="[0]"))
    with pytest.raises(ConfigError, match="no_such_knob"):
        FrameEngine(spec, modulated=["no_such_knob"])


# ------------------------------------------------------------ 2-D table, knobs


@pytest.fixture(scope="module")
def knee_engine():
    """night_knee with its knee current modulated: a 2-D table on Y′ for the knee stage
    (the hand-turned black trim is a run of its own after it)."""
    spec = load_chain(chain_path("night_knee"))
    return spec, FrameEngine(spec, modulated=["knee_current"])


def test_modulated_table_matches_solver_at_random_points(knee_engine):
    spec, eng = knee_engine
    run = eng.runs[0][0]
    assert run.knob == "knee_current" and run.table.is_2d
    ls = spec.live["knee_current"]
    rng = np.random.default_rng(20240611)
    n = 300
    v = rng.uniform(run.lo_v, run.hi_v, n)
    c = np.exp(rng.uniform(np.log(ls.lo), np.log(ls.hi), n))
    got = apply_table(v.astype(np.float32)[None, :], run.table, control=c[None, :])[0]
    model = ChainModel(spec)
    ref = np.array([model.transfer(0, [vi], live={"knee_current": ci}, stages=run.stages,
                                   t_kelvin=eng.state.t_kelvin)[0]
                    for vi, ci in zip(v, c, strict=True)])
    err = np.abs(got - ref)
    assert err.max() <= run.table.err_v + F32_SLACK_V, (err.max(), run.table.err_v)
    # the modulation is real: over the knob range the output moves by far more than the bound
    spread = np.ptp(ref - apply_table(v.astype(np.float32)[None, :], run.table,
                                      control=np.full((1, n), ls.lo))[0])
    assert spread > 100 * run.table.err_v


def test_set_live_rebuilds_and_changes_the_output():
    spec = load_chain(chain_path("night_knee"))
    eng = FrameEngine(spec)
    # a ramp, then 100 pixels held at white so the line filter settles to the DC answer
    ramp = np.concatenate([np.linspace(-0.35, 0.35, 256), np.full(100, 0.35)]).astype(np.float32)
    planes = np.ascontiguousarray(np.broadcast_to(ramp, (3, 4, ramp.size)))
    before = eng.process(planes).copy()
    table_before = eng.runs[0][0].table
    eng.set_live("knee_current", 100e-6)
    assert eng.runs[0][0].table is not table_before  # rebuilt
    after = eng.process(planes).copy()
    # Pb/Pr carry no stage: untouched, bit for bit
    np.testing.assert_array_equal(after[1:], planes[1:])
    assert np.max(np.abs(after[0] - before[0])) > 10e-3  # a clearly visible change
    # at the right end of each line (100 pixels = 1.3 µs flat, > 90 time constants of the
    # 11.4 MHz closed-loop pole) the new output is the solver's at 100 µA
    ref = ChainModel(spec).transfer(0, ramp[-1:].astype(np.float64),
                                    live={"knee_current": 100e-6}, t_kelvin=eng.state.t_kelvin)
    assert abs(after[0, 0, -1] - ref[0]) <= eng.worst_table_err_v + F32_SLACK_V
    # turning back gives the first picture again
    eng.set_live("knee_current", spec.live["knee_current"].value)
    np.testing.assert_array_equal(eng.process(planes), before)


def test_set_live_clamps_to_the_knob_range():
    spec = load_chain(chain_path("night_knee"))
    eng = FrameEngine(spec)
    eng.set_live("knee_current", 1.0)  # 1 A: far beyond max = 200 µA
    assert eng.state.live["knee_current"] == spec.live["knee_current"].hi


# ------------------------------------------------------------ dynamics at blanking


@pytest.mark.parametrize("name", DEMO_CHAINS)
def test_flat_field_at_blanking_is_unchanged_by_dynamics(name):
    spec = load_chain(chain_path(name))
    eng = FrameEngine(spec, pixel_period_s=1 / 74.25e6, lead_in_samples=192)
    assert any(r.line_filter is not None for rs in eng.runs for r in rs)
    offs = centre_offsets_v(spec.space)
    planes = np.empty((3, 6, 300), np.float32)
    for ch in range(3):
        planes[ch] = -offs[ch]  # blanking level (black for Y′/R′G′B′, zero for Pb/Pr)
    out = eng.process(planes)
    model = ChainModel(spec)
    for ch in range(3):
        static = planes[ch].copy()
        for run in eng.runs[ch]:  # the same runs without their line filters
            static = apply_table(static, run.table)
        np.testing.assert_array_equal(out[ch], static)
        ref = model.transfer(ch, [-offs[ch]], t_kelvin=eng.state.t_kelvin)[0]
        bound = sum(r.table.err_v for r in eng.runs[ch]) + F32_SLACK_V
        assert np.all(np.abs(out[ch] - ref) <= bound)


# ------------------------------------------------------- table path vs solver path


@pytest.fixture(scope="module")
def demo_crop():
    """A 320×180 crop of demo-clip frame 60 (2 s in): lanterns, fruit, awning edges."""
    with open_source(str(demo_clip()), start_s=2.0, duration_s=0.04) as src:
        fr = next(iter(src))
    return fr.index, np.ascontiguousarray(fr.rgb[260:440, 380:700])


def _filter_gain(run) -> float:
    """Sum of |impulse response| of a run's line filter (its worst-case gain for a
    difference signal), measured with a 0.1 mV impulse on the blanking level."""
    amp = 1e-4
    row = np.full((1, 600), run.blank_out_v, np.float32)
    row[0, 300] += amp
    out = np.empty_like(row)
    apply_line_filter(row, run.line_filter, blank_level_v=run.blank_out_v, lead_in_samples=0,
                      out=out)
    return float(np.abs(out.astype(np.float64) - run.blank_out_v).sum() / amp)


@pytest.mark.parametrize("name", DEMO_CHAINS)
def test_table_path_equals_exact_path_on_demo_pictures(name, demo_crop):
    index, rgb = demo_crop
    spec = load_chain(chain_path(name))
    h, w = rgb.shape[:2]
    tab = FrameFlow(spec, width=w, height=h, fps=30.0, clip_matrix="bt709")
    ex = FrameFlow(spec, width=w, height=h, fps=30.0, clip_matrix="bt709", exact=True)
    tab.process(rgb, index)
    ex.process(rgb, index)
    np.testing.assert_array_equal(tab.planes_in, ex.planes_in)
    assert ex.engine.worst_table_err_v == 0.0
    for ch in range(3):
        runs = tab.engine.runs[ch]
        if not runs:
            np.testing.assert_array_equal(tab.planes_out[ch], ex.planes_out[ch])
            continue
        # one table error per run, passed on by every later line filter
        bound = 0.0
        for run in runs:
            bound += run.table.err_v
            if run.line_filter is not None:
                bound *= _filter_gain(run)
        diff = np.abs(tab.planes_out[ch].astype(np.float64) - ex.planes_out[ch])
        assert diff.max() <= bound + F32_SLACK_V, (ch, diff.max(), bound)
        # and the chain does something on this picture (the check is not vacuous)
        assert np.max(np.abs(ex.planes_out[ch] - ex.planes_in[ch])) > 0.01
