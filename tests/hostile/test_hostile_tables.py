"""The table builder's work is bounded: a 2-D table that cannot reach its error goal stops
at a fixed number of solver evaluations and names the point it failed at; a solver that
returns no number names the input (and control) where it happened.

The functions here stand in for the DC solver (cheap to call, so the count of calls is
what is measured, not time): a step in the output (no grid of finite size interpolates a
jump within 0.05 mV) and a curve with a hole (NaN) at one input.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.engine import tables
from livecurve.errors import SolverError


def test_2d_build_that_cannot_converge_stops_within_its_budget():
    calls = [0]

    def jump(v, c):
        # a knee whose position moves with the control: a step no grid resolves
        calls[0] += np.size(v)
        return np.where(v > 0.3 * c, 1.0, -1.0)

    with pytest.raises(SolverError) as info:
        tables.build_table_2d(jump, -1.0, 1.0, -1.0, 1.0)
    msg = str(info.value)
    assert "stopped after" in msg and "at input" in msg and "control" in msg
    assert "[sweep]" in msg
    # the budget covers the 2-D grid; the three 1-D probes come on top (≤ 3 × 2 × N_MAX_2D)
    assert calls[0] <= tables.MAX_SOLVES_2D + 3 * 2 * tables.N_MAX_2D + 3 * tables.N_MAX_2D


def test_2d_build_of_a_smooth_curve_is_unchanged():
    t = tables.build_table_2d(lambda v, c: np.tanh(v * c), -1.0, 1.0, 0.5, 2.0)
    assert t.err_v <= tables.TARGET_ERR_V
    assert t.n_solves < tables.MAX_SOLVES_2D


def test_no_finite_output_names_the_input():
    def hole(v):
        v = np.asarray(v, dtype=float)
        return np.where(np.abs(v - 0.25) < 1e-3, np.nan, v)

    with pytest.raises(SolverError, match=r"no finite output at input 0\.25"):
        tables.build_table_1d(hole, -1.0, 1.0)


def test_no_finite_output_in_2d_names_input_and_control():
    def hole(v, c):
        return np.where((np.abs(v) < 0.01) & (c > 1.5), np.nan, v * c)

    with pytest.raises(SolverError, match=r"no finite output at input .* V, control 2"):
        tables.build_table_2d(hole, -1.0, 1.0, 1.0, 2.0)


def test_modulated_knob_over_a_rail_to_rail_sweep_is_refused_not_hung(tmp_path, monkeypatch):
    # The demo knee chain with its sweep widened to the rails (±12 V): the 2-D table for the
    # modulated knob cannot reach its goal there; the build stops at its budget and says
    # where, instead of spending ~2 million solver evaluations (minutes) on it.
    import re

    from livecurve.config.chainfile import load_chain
    from livecurve.engine.pipeline import FrameEngine
    from tests.conftest import ROOT
    text = (ROOT / "configs" / "night_knee.toml").read_text()
    text, n = re.subn(r'\[sweep\]\nfrom = "[^"]+"\nto = "[^"]+"',
                      '[sweep]\nfrom = "-12V"\nto = "12V"', text)
    assert n == 1
    p = tmp_path / "wide.toml"
    p.write_text(text)
    spec = load_chain(p)
    calls = [0]
    real = tables.build_table_2d

    def counting(fn, *a, **k):
        def counted(v, c):
            calls[0] += np.size(v)
            return fn(v, c)
        return real(counted, *a, **k)

    monkeypatch.setattr(tables, "build_table_2d", counting)
    with pytest.raises(SolverError, match=r"stopped after .* at input .* V, control"):
        FrameEngine(spec, modulated=("knee_current",))
    assert calls[0] <= tables.MAX_SOLVES_2D + 3 * 3 * tables.N_MAX_2D
