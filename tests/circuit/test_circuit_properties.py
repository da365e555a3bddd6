"""Properties of the DC solver over random component values and over every demo chain's
live range (hypothesis): it converges, gives no NaN, and is monotone where the
topology is (every stage kind is an inverting op-amp stage except the non-inverting
gain stage, and junction laws are monotone: Shockley 1949; AN-30 for the log forms).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livecurve.circuit.chain import ChainModel
from livecurve.circuit.netlist import solve_sweep
from livecurve.circuit.stages import KINDS
from livecurve.config.chainfile import load_chain
from tests.circuit._random_stages import stages

CONFIGS = sorted((Path(__file__).resolve().parents[2] / "configs").glob("*.toml"))
SPECS = {p.stem: load_chain(p) for p in CONFIGS}
#: Slack on monotonicity: a flat (saturated) stretch may wiggle by the solver's tolerance.
FLAT_V = 1e-8
SIGN = {k: (+1 if k == "noninverting_gain" else -1) for k in KINDS}

PROP = settings(max_examples=25, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])


def _check_monotone(y, sign, what):
    d = np.diff(y) * sign
    assert np.all(d >= -FLAT_V), f"{what}: not monotone, worst step {d.min():.3g} V"


@pytest.mark.parametrize("kind", list(KINDS))
def test_random_stage_converges_and_is_monotone(kind):
    @PROP
    @given(stage=stages(kind), t_c=st.floats(0.0, 50.0))
    def check(stage, t_c):
        vin = np.linspace(stage.lo_v, stage.hi_v, 121)
        y = solve_sweep(stage.net, vin, t_kelvin=t_c + 273.15)  # raises if it does not converge
        assert np.all(np.isfinite(y))
        _check_monotone(y, stage.sign, f"{kind} {stage.params}")
        # the same points swept downwards (other warm starts) give the same answers
        y_down = solve_sweep(stage.net, vin[::-1], t_kelvin=t_c + 273.15)[::-1]
        np.testing.assert_allclose(y_down, y, atol=1e-7)

    check()


@st.composite
def chain_states(draw, name):
    """Knob values anywhere in their ranges and a temperature of 0 … 50 °C."""
    spec = SPECS[name]
    live = {k: draw(st.floats(ls.lo, ls.hi)) for k, ls in spec.live.items()}
    return live, draw(st.floats(0.0, 50.0)) + 273.15


@pytest.mark.parametrize("name", list(SPECS))
def test_demo_chain_live_range(name):
    spec = SPECS[name]
    model = ChainModel(spec)
    vin = np.linspace(*spec.sweep_v, 161)

    @settings(max_examples=15, deadline=None, derandomize=True)
    @given(state=chain_states(name))
    def check(state):
        live, t_k = state
        for ch in range(3):
            v = vin
            sign = 1
            for stage in model.stages_for(ch):
                out = model.transfer(ch, v, t_kelvin=t_k, live=live, stages=[stage])
                assert np.all(np.isfinite(out)), (stage.id, live, t_k)
                if stage.kind in SIGN:
                    sign *= SIGN[stage.kind]
                    # each stage is monotone in its own input; inputs arrive sorted or reversed
                    order = np.argsort(v)
                    _check_monotone(out[order], SIGN[stage.kind], f"{name}:{stage.id} {live}")
                v = out
            _check_monotone(v, sign, f"{name} channel {ch} {live}")
            whole = model.transfer(ch, vin, t_kelvin=t_k, live=live)
            np.testing.assert_allclose(whole, v, atol=1e-9)

    check()
