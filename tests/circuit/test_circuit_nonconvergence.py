"""A stage the DC solver cannot converge names the node and the elements at fault.

Every failing stage here fails in the real solver (nothing is patched to fail): a current
source pushing 1 A into 5 kΩ (the node would sit at 5 kV, beyond what damped Newton steps
of 1 V reach in the iteration cap), two voltage sources across the same node (MNA is
singular), an op-amp whose output feeds its own + input through a diode (positive
feedback across a junction: the iterate cycles), a Schmitt-style loop through a
resistor, and a pnp/npn latch.  Circuit facts: modified nodal analysis
(Ho–Ruehli–Brennan 1975) is singular for a loop of voltage sources and for a node with
no DC path to ground.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.circuit import nonconvergence
from livecurve.circuit import solver as _s
from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.netlist import Netlist, solve_sweep
from livecurve.circuit.stages import OpampSpec, build_stage
from livecurve.circuit.userdeck import build_user_stage
from livecurve.cli import main
from livecurve.errors import SolverError

MODELS = {"d": DiodeModel(), "qn": BjtModel(), "qp": BjtModel(polarity="pnp")}
SWEEP_V = np.linspace(-1.0, 1.0, 65)

RUNAWAY = ["R1 in out 10k", "I1 0 out 1", "R3 out 0 10k"]
SOURCE_LOOP = ["R1 in out 10k", "V1 a 0 1", "V2 a 0 2", "R2 a out 1k"]
FEEDBACK_DIODE = ["R1 in p 10k", "D1 out p d", "U1 p 0 out", "R3 out 0 10k"]
SCHMITT = ["R1 in m 10k", "U1 p m out", "R2 out p 10k", "R3 p 0 1k"]
LATCH = ["R1 in g 10k", "Q1 k g 0 qn", "Q2 g k a qp", "V1 a 0 5", "R2 k out 1k",
         "R3 out 0 1k"]


def _user(lines, name="user"):
    return build_user_stage(lines, MODELS, OpampSpec(), name=name, key=f"{name}.elements")


def _failure(lines, name="user") -> str:
    with pytest.raises(SolverError) as info:
        solve_sweep(_user(lines, name), SWEEP_V)
    return str(info.value)


def test_runaway_node_names_node_current_source_and_target():
    msg = _failure(RUNAWAY, "runaway")
    assert "stage 'runaway' at input -1 V (65 of 65 points)" in msg
    assert "node 'out' does not settle" in msg
    assert "I1 (current source 1 A)" in msg
    # 1 A into 10 kΩ ∥ 10 kΩ: Newton heads for 5 kV and the KCL residual is 1 A − 200 V/5 kΩ
    assert "Newton heads for +5 kV" in msg
    assert "KCL residual 960 mA" in msg


def test_loop_of_voltage_sources_names_both_sources_and_node():
    msg = _failure(SOURCE_LOOP, "loop")
    assert "V1 (voltage source), V2 (voltage source) form a loop of voltage sources" in msg
    assert "at node 'a'" in msg


def test_source_in_parallel_with_input_names_input_source():
    msg = _failure(["R1 in out 10k", "V1 in 0 1"])
    assert "VIN (input source), V1 (voltage source) form a loop" in msg
    assert "node 'in'" in msg


def test_positive_feedback_across_a_diode_names_diode_and_opamp():
    msg = _failure(FEEDBACK_DIODE, "latchdiode")
    assert "stage 'latchdiode'" in msg
    assert "node 'out' does not settle" in msg
    assert "D1 (diode, junction" in msg
    assert "U1 (op-amp, output" in msg
    assert "its output reaches its + input through D1" in msg


def test_schmitt_loop_names_opamp_at_its_limits_and_feedback_resistor():
    msg = _failure(SCHMITT)
    assert "node 'out' does not settle" in msg
    # the default op-amp: ±12 V rails less 1.5 V headroom
    assert "U1 (op-amp, output swings between -10.5 V and +10.5 V" in msg
    assert "its output reaches its + input through R2" in msg


def test_transistor_latch_names_the_shared_node_and_both_transistors():
    msg = _failure(LATCH)
    assert "node 'g' does not settle" in msg
    assert "Q1 (npn transistor, VBE" in msg
    assert "Q2 (pnp transistor, VEB" in msg


def test_nonlinear_elements_are_listed_before_linear_ones():
    msg = _failure(FEEDBACK_DIODE)
    listed = msg.split("elements there: ", 1)[1]
    assert listed.index("R3 (") > max(listed.index("D1 ("), listed.index("U1 ("))


def test_node_without_dc_path_names_node_and_the_only_element_reaching_it():
    # the user deck refuses this before solving; a Netlist built in code reaches the solver
    net = Netlist("floating")
    net.vin()
    net.resistor("R1", "in", "out", 10e3)
    net.resistor("R3", "out", "0", 10e3)
    net.current("I1", "0", "mid", 1e-3)
    with pytest.raises(SolverError) as info:
        solve_sweep(net, [0.0, 0.5])
    msg = str(info.value)
    assert "node 'mid' has no DC path to ground: only I1 (current source 1 mA) reach it" in msg


def test_inner_node_of_a_series_resistance_is_named_through_its_element():
    net = Netlist("rs")
    net.vin()
    net.diode("D1", "in", "out", DiodeModel(rs_ohm=10.0))
    net.resistor("R1", "out", "0", 1e3)
    comp = net.compile(300.15)
    inner = comp.node_index["D1#a"]
    assert nonconvergence._node_label(comp, inner) == (
        "the inner anode of D1 (behind its series resistance from node 'in')")


def test_every_compiled_row_belongs_to_the_element_that_made_it():
    net = _user(["R1 in s 10k", "U1 0 s out", "D1 s out d", "Q1 out s 0 qn", "C1 s out 1n"])
    comp = net.compile(300.15)
    assert len(comp.row_element) == comp.kinds.shape[0]
    assert comp.row_element == ["VIN", "R1", "U1", "D1", "Q1"]
    assert comp.element_kind["C1"] == "C" and "C1" not in comp.row_element


def test_messages_are_one_line():
    for lines in (RUNAWAY, SOURCE_LOOP, FEEDBACK_DIODE, SCHMITT, LATCH):
        assert "\n" not in _failure(lines)


def test_diagnosis_that_fails_leaves_the_plain_message(monkeypatch):
    def broken(*args, **kw):
        raise RuntimeError("diagnosis broke")

    monkeypatch.setattr(nonconvergence, "diagnose", broken)
    msg = _failure(RUNAWAY, "runaway")
    assert msg == ("DC solver did not converge for stage 'runaway' at input -1 V "
                   "(65 of 65 points)")


@pytest.mark.parametrize("lines", [
    ["R1 in s 10k", "U1 0 s out", "D1 s out d"],
    ["R1 in s 10k", "U1 0 s out", "Q1 out 0 s qn", "R2 s out 1meg"],
    ["R1 in a 1k", "D1 a out d", "D2 out a d", "R2 out 0 10k"],
])
def test_converging_sweep_is_the_kernel_output_bit_for_bit(lines, monkeypatch):
    calls = []
    monkeypatch.setattr(nonconvergence, "diagnose", lambda *a, **kw: calls.append(a) or "")
    net = _user(lines)
    got = solve_sweep(net, SWEEP_V, node="*")
    comp = net.compile(300.15)
    want = np.empty((SWEEP_V.size, comp.n_unknowns))
    ok = np.zeros(SWEEP_V.size, dtype=np.bool_)
    _s._solve_sweep(comp.kinds, comp.nodes, comp.params, comp.branch, comp.n_nodes,
                    np.ascontiguousarray(SWEEP_V), np.zeros(comp.n_unknowns), False, want, ok)
    assert ok.all() and not calls  # converged, and the diagnosis never ran
    assert np.array_equal(got, want)
    assert got.tobytes() == want.tobytes()


def test_builtin_stage_sweep_unchanged_with_strict_or_not():
    net = build_stage("log_transdiode", {"r_in": 10e3, "i_ref": 0.0}, DiodeModel(),
                      OpampSpec(), name="log")
    vin = np.linspace(0.01, 1.0, 129)
    a = solve_sweep(net, vin)
    b = solve_sweep(net, vin, strict=False)
    assert np.isfinite(a).all() and a.tobytes() == b.tobytes()


def _chain(tmp_path, lines, models=""):
    path = tmp_path / "x.toml"
    cards = ", ".join(f'"{c}"' for c in lines)
    path.write_text(f'space = "rgb"\n[[stage]]\nid = "user"\nkind = "netlist"\n'
                    f"elements = [{cards}]\n{models}")
    return path


def _check(path, capsys) -> tuple[int, str]:
    rc = main(["check", str(path)])
    return rc, capsys.readouterr().err


DIODE_MODEL = '[stage.models.d]\ntype = "diode"\nis = "1e-14"\n'


def test_cli_check_names_file_channel_stage_node_and_element_exit_2(tmp_path, capsys):
    path = _chain(tmp_path, RUNAWAY)
    rc, err = _check(path, capsys)
    assert rc == 2
    assert err.startswith(f"livecurve: {path}: channel 0: DC solver did not converge for "
                          "stage 'user'")
    assert "node 'out' does not settle" in err and "I1 (current source 1 A)" in err
    assert "Traceback" not in err and err.count("\n") == 1


def test_cli_check_feedback_diode_names_diode_and_opamp_exit_2(tmp_path, capsys):
    path = _chain(tmp_path, FEEDBACK_DIODE, DIODE_MODEL)
    rc, err = _check(path, capsys)
    assert rc == 2
    assert str(path) in err and "stage 'user'" in err
    assert "node 'out' does not settle" in err
    assert "D1 (diode" in err and "U1 (op-amp" in err
    assert "Traceback" not in err and err.count("\n") == 1


def test_cli_check_source_loop_names_both_sources_exit_2(tmp_path, capsys):
    path = _chain(tmp_path, SOURCE_LOOP)
    rc, err = _check(path, capsys)
    assert rc == 2
    assert str(path) in err and "V1 (voltage source), V2 (voltage source) form a loop" in err
    assert "Traceback" not in err and err.count("\n") == 1
