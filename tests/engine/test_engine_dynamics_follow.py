"""Line filters follow the knobs and the junction temperature.

A stage's line-rate filter is derived from its schematic (or its hand figures) at the
operating point; turning a knob on that stage, or warming its junctions, moves the
operating point and so the filter.  Checks:

* turning a knob, or changing the temperature, gives the filter (and the pictures) an
  engine built at that knob value or temperature from the start gives: bit for bit;
* the filter moves as textbook formulas say (from memory, standard op-amp and diode
  texts): a compensation capacitor's pole at 1/(2π·Rf·Cf); a closed-loop pole at GBW over
  the noise gain 1 + Rf/Rin of an inverting stage; a transdiode stage's pole at
  1/(2π·r_d·C) with r_d = n·k·T/(q·I) (Shockley), so at a fixed current the pole falls as
  1/T;
* a modulated knob's filter stays where the knob started (one filter a frame).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from livecurve.config.chainfile import parse_chain
from livecurve.engine.fused import FusedChain
from livecurve.engine.pipeline import FrameEngine

F_PIX = 74.25e6
K_B = 1.380649e-23     # J/K (SI, exact)
Q_E = 1.602176634e-19  # C (SI, exact)

#: A compensation capacitor across the feedback resistor (our own values), ideal-ish
#: op-amp (no gbw): one pole at 1/(2π·Rf·Cf).
COMP = ["RIN in sum 1k", "RF sum out 2k", "CF sum out 4.7p", "U1 0 sum out"]

#: A transdiode log stage with 10 pF across its junction, biased by a 10 µA reference
#: (our own values; the stage of benchmarks/bench_schematic_split.py).
LOGC = ["RIN in sum 10k", "IREF 0 sum 10u", "D1 sum out dj", "CF sum out 10p",
        "U1 0 sum out"]


def _comp_spec(extra: dict | None = None):
    return parse_chain({"title": "comp", "space": "rgb", "format": "1080p30",
                        "opamp": {"a_ol": 2e5},
                        "stage": [{"id": "s", "kind": "netlist", "elements": COMP}],
                        "live": {"cf": {"target": "s.CF", "min": "2p", "max": "22p"}},
                        **(extra or {})})


def _log_spec():
    return parse_chain({"title": "logc", "space": "ypbpr", "format": "1080p30",
                        "ambient": "27C", "opamp": {"a_ol": 2e5},
                        "sweep": {"from": "-0.05V", "to": "0.6V"},
                        "stage": [{"id": "logc", "kind": "netlist", "channels": [1],
                                   "elements": LOGC,
                                   "models": {"dj": {"type": "diode", "is": "1e-14"}}}]})


def _gain_spec():
    return parse_chain({"title": "gain", "space": "rgb", "format": "1080p30",
                        "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                   "r_f": "10k", "dynamics": {"gbw": "60MHz"}}],
                        "live": {"rf": {"target": "g.r_f", "min": "5k", "max": "40k"}}})


def _coef(eng, ch=0):
    return eng.runs[ch][-1].line_filter.coef


def _pole_hz(c_f):
    return 1 / (2 * math.pi * 2e3 * c_f)


def test_turning_a_capacitor_knob_moves_the_schematic_pole():
    eng = FrameEngine(_comp_spec(), pixel_period_s=1 / F_PIX)
    before = eng.runs[0][0].line_filter
    assert eng.runs[0][0].dynamics.bandwidth_3db_hz == pytest.approx(_pole_hz(4.7e-12),
                                                                      rel=1e-3)
    eng.set_live("cf", 11e-12)
    run = eng.runs[0][0]
    # textbook single pole of −Rf/Rin/(1 + s·Rf·Cf) with the new capacitor
    assert run.dynamics.bandwidth_3db_hz == pytest.approx(_pole_hz(11e-12), rel=1e-3)
    assert run.line_filter is not before
    # the same filter as an engine whose knob starts at 11 pF
    fresh = FrameEngine(_comp_spec({"live": {"cf": {"target": "s.CF", "min": "2p",
                                                    "max": "22p", "value": "11p"}}}),
                        pixel_period_s=1 / F_PIX)
    np.testing.assert_array_equal(_coef(eng), _coef(fresh))
    # and back: turning it home gives the first filter's coefficients again
    eng.set_live("cf", 4.7e-12)
    np.testing.assert_array_equal(eng.runs[0][0].line_filter.coef, before.coef)


def test_a_turned_knob_reaches_the_pictures_of_the_one_pass_kernel():
    """The fused kernel re-reads the filter after a turn: an edge through it equals an
    edge through an engine built at the new value."""
    spec = _comp_spec()
    eng = FrameEngine(spec, pixel_period_s=1 / F_PIX)
    fresh = FrameEngine(_comp_spec({"live": {"cf": {"target": "s.CF", "min": "2p",
                                                    "max": "22p", "value": "20p"}}}),
                        pixel_period_s=1 / F_PIX)
    y = np.full((16, 64), 16, np.uint8)
    y[:, 32:] = 235                       # a black-to-white edge on every line
    cb = np.full((8, 32), 128, np.uint8)
    cr = cb.copy()

    def run(e):
        fc = FusedChain(e, space="rgb", standard="bt709")
        return fc.process(y, cb, cr)

    first = run(eng)[0].copy()
    fc = FusedChain(eng, space="rgb", standard="bt709")
    fc.process(y, cb, cr)                 # packed at 4.7 pF
    eng.set_live("cf", 20e-12)
    turned = fc.process(y, cb, cr)[0]
    want = run(fresh)[0]
    np.testing.assert_array_equal(turned, want)
    # the slower pole really changes the edge (so the check means something)
    assert np.any(turned != first)


def test_a_gain_knob_moves_the_closed_loop_pole_of_hand_figures():
    """Hand figures give the op-amp's GBW; the closed-loop pole is GBW / noise gain, and an
    inverting stage's noise gain is 1 + Rf/Rin: it follows the Rf knob."""
    eng = FrameEngine(_gain_spec(), pixel_period_s=1 / F_PIX)
    dyn = eng.runs[0][0].dynamics
    assert dyn.noise_gain == pytest.approx(2.0)
    assert dyn.bandwidth_3db_hz == pytest.approx(60e6 / 2.0, rel=1e-9)
    eng.set_live("rf", 30e3)
    dyn = eng.runs[0][0].dynamics
    assert dyn.noise_gain == pytest.approx(4.0)
    assert dyn.bandwidth_3db_hz == pytest.approx(60e6 / 4.0, rel=1e-9)


def test_a_channel_override_enters_the_noise_gain_of_hand_figures():
    """A board with its own Rf gets its own closed-loop pole (GBW / (1 + Rf/Rin))."""
    spec = parse_chain({"title": "boards", "space": "rgb", "format": "1080p30",
                        "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                   "r_f": "10k", "dynamics": {"gbw": "60MHz"}}],
                        "channel": {"2": {"g.r_f": "20k"}}})
    eng = FrameEngine(spec, pixel_period_s=1 / F_PIX)
    assert eng.runs[0][0].dynamics.noise_gain == pytest.approx(2.0)
    assert eng.runs[2][0].dynamics.noise_gain == pytest.approx(3.0)


def test_warming_a_transdiode_stage_slows_its_pole_as_shockley_says():
    """At a fixed junction current the small-signal resistance n·k·T/(q·I) grows with T, so
    the pole 1/(2π·r_d·C) of a log stage with C across its junction falls as 1/T."""
    t1, t2 = 300.15, 333.15
    eng = FrameEngine(_log_spec(), pixel_period_s=1 / F_PIX)
    f1 = eng.runs[1][0].dynamics.bandwidth_3db_hz
    # at 0 V in the junction carries the 10 µA reference: r_d = k·T/(q·10 µA)
    r_d = K_B * t1 / Q_E / 10e-6
    # measured: the op-amp's finite gain (2e5) moves it by < 0.1 %; bound 1 %
    assert f1 == pytest.approx(1 / (2 * math.pi * r_d * 10e-12), rel=0.01)
    eng.set_temperature(t2)
    f2 = eng.runs[1][0].dynamics.bandwidth_3db_hz
    # the ratio, where the op-amp's small share cancels: measured within 1e-4; bound 1e-3
    assert f2 / f1 == pytest.approx(t1 / t2, rel=1e-3)
    fresh = FrameEngine(_log_spec(), pixel_period_s=1 / F_PIX, t_kelvin=t2)
    np.testing.assert_array_equal(_coef(eng, 1), _coef(fresh, 1))


def test_a_stage_temperature_of_its_own_reaches_its_filter():
    """Self-heating or a drift profile may give one stage its own junction temperature."""
    eng = FrameEngine(_log_spec(), pixel_period_s=1 / F_PIX)
    before = eng.runs[1][0].line_filter
    eng.set_temperature(300.15, {"logc": 320.15})
    fresh = FrameEngine(_log_spec(), pixel_period_s=1 / F_PIX, t_kelvin=320.15)
    assert eng.runs[1][0].line_filter is not before
    np.testing.assert_array_equal(_coef(eng, 1), _coef(fresh, 1))


def test_a_rebuild_that_changes_nothing_keeps_the_filter_object():
    """Turning a knob on another stage, or re-setting the same temperature, does not
    re-derive the filter (the fused kernel repacks only what changed)."""
    spec = parse_chain({"title": "two", "space": "rgb", "format": "1080p30",
                        "opamp": {"a_ol": 2e5},
                        "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                   "r_f": "10k"},
                                  {"id": "s", "kind": "netlist", "elements": COMP}],
                        "live": {"rf": {"target": "g.r_f", "min": "5k", "max": "40k"}}})
    eng = FrameEngine(spec, pixel_period_s=1 / F_PIX)
    lf = eng.runs[0][-1].line_filter
    eng.set_live("rf", 20e3)
    eng.set_temperature(eng.state.t_kelvin)
    assert eng.runs[0][-1].line_filter is lf


def test_a_modulated_knob_keeps_the_filter_of_its_starting_value():
    eng = FrameEngine(_comp_spec(), modulated=["cf"], pixel_period_s=1 / F_PIX)
    coef = _coef(eng).copy()
    eng.set_live("cf", 20e-12)          # a control moving the knob
    eng.set_temperature(320.15)         # a rebuild for another reason
    np.testing.assert_array_equal(_coef(eng), coef)
