"""Chain files: every refusal names the file, the key path and the value, and the command
line turns it into a one-line message and a non-zero exit (no traceback).

The TOML grammar itself is the TOML 1.0.0 specification (toml.io), read by Python's
tomllib; the checks on values (resistances above zero, IS > 0, rails in order) are the
physical limits of real parts (common practice).
"""

from __future__ import annotations

import copy
import subprocess
import sys
from pathlib import Path

import pytest
import tomli_w

from livecurve.cli import main
from livecurve.config.chainfile import load_chain
from livecurve.errors import ConfigError

ROOT = Path(__file__).resolve().parents[2]

BASE = {
    "title": "test chain",
    "space": "rgb",
    "supply": {"v_pos": "12V", "v_neg": "-12V"},
    "stage": [
        {"id": "gain", "kind": "inverting_gain", "r_in": "10k", "r_f": "22k"},
        {"id": "knee", "kind": "log_transdiode", "r_in": "10k", "i_ref": "60uA",
         "junction": "diode", "device": {"is": "1e-14", "n": 1.0}},
        {"id": "user", "kind": "netlist", "channels": [0],
         "elements": ["R1 in sum 10k", "R2 sum out 10k", "U1 0 sum out"]},
    ],
    "live": {"k": {"target": "knee.i_ref", "min": "40uA", "max": "200uA"}},
}


def _write(tmp_path, raw, name="chain.toml") -> Path:
    p = tmp_path / name
    p.write_text(tomli_w.dumps(raw), encoding="utf-8")
    return p


def _mutated(change) -> dict:
    raw = copy.deepcopy(BASE)
    change(raw)
    return raw


def test_base_chain_loads(tmp_path):
    spec = load_chain(_write(tmp_path, BASE))
    assert [s.id for s in spec.stages] == ["gain", "knee", "user"]
    assert spec.stage("gain").params["r_in"] == 10e3
    assert spec.live["k"].lo == pytest.approx(40e-6)


def _set(path, value):
    """A change setting raw[path...] = value (path as a tuple of keys / list indices)."""
    def change(raw):
        d = raw
        for k in path[:-1]:
            d = d[k]
        d[path[-1]] = value
    return change


def _delete(path):
    def change(raw):
        d = raw
        for k in path[:-1]:
            d = d[k]
        del d[path[-1]]
    return change


# (case id, change to BASE, key path the message must name, value text it must show)
BAD = [
    ("unknown_top_key", _set(("colour",), "warm"), "colour", "warm"),
    ("unknown_stage_key", _set(("stage", 0, "r_inn"), "10k"), "stage[0] (gain).r_inn", "10k"),
    ("missing_r_in", _delete(("stage", 0, "r_in")), "stage[0] (gain).r_in", None),
    # values are quoted as written ("-22k"), not as the SI float they became ("-22000.0")
    ("negative_resistance", _set(("stage", 0, "r_f"), "-22k"), "stage[0] (gain).r_f",
     "'-22k'"),
    ("negative_r_off", _set(("stage", 0, "r_off"), "-1k"), "stage[0] (gain).r_off", "'-1k'"),
    ("rails_reversed", _set(("supply",), {"v_pos": "-12V", "v_neg": "12V"}), "supply",
     "v_pos=-12 V, v_neg=12 V"),
    ("junction_is_negative", _set(("stage", 1, "device", "is"), "-1e-14"),
     "stage[1] (knee).device.is", "-1e-14"),
    ("junction_is_zero_text", _set(("stage", 1, "device", "is"), "0"),
     "stage[1] (knee).device.is", "0"),
    ("junction_is_zero_number", _set(("stage", 1, "device", "is"), 0),
     "stage[1] (knee).device.is", "0"),
    ("junction_n_zero", _set(("stage", 1, "device", "n"), 0.0), "stage[1] (knee).device.n", "0"),
    ("unknown_device_key", _set(("stage", 1, "device", "bf"), 100),
     "stage[1] (knee).device.bf", "100"),
    ("wrong_unit", _set(("stage", 0, "r_in"), "10kV"), "stage[0] (gain).r_in", "10kV"),
    ("unknown_kind", _set(("stage", 0, "kind"), "log_amp"), "stage[0] (gain).kind", "log_amp"),
    ("bad_junction", _set(("stage", 1, "junction"), "jfet"), "stage[1] (knee).junction", "jfet"),
    ("bad_channels", _set(("stage", 0, "channels"), [0, 3]), "stage[0] (gain).channels",
     "[0, 3]"),
    ("channels_not_list", _set(("stage", 0, "channels"), "Y"), "stage[0] (gain).channels",
     "'Y'"),
    ("channels_empty", _set(("stage", 0, "channels"), []), "stage[0] (gain).channels", "[]"),
    ("live_missing_stage", _set(("live", "k", "target"), "nope.i_ref"), "live.k.target",
     "nope.i_ref"),
    ("live_missing_param", _set(("live", "k", "target"), "knee.r_x"), "live.k.target",
     "r_x"),
    ("live_min_above_max", _set(("live", "k"), {"target": "knee.i_ref", "min": "200uA",
                                                "max": "40uA"}), "live.k", "min 200uA, max 40uA"),
    ("live_value_outside", _set(("live", "k", "value"), "300uA"), "live.k.value", "'300uA'"),
    ("bad_card_arity", _set(("stage", 2, "elements"), ["R1 in out", "U1 0 in out"]),
     "stage[2] (user).elements[0]", "R1 in out"),
    ("bad_card_letter", _set(("stage", 2, "elements"), ["X1 in out 1k", "U1 0 in out"]),
     "stage[2] (user).elements[0]", "X1 in out 1k"),
    ("bad_card_model", _set(("stage", 2, "elements"), ["R1 in sum 1k", "D1 sum out dm",
                                                        "U1 0 sum out"]),
     "stage[2] (user).elements[1]", "D1 sum out dm"),
    ("bad_card_value", _set(("stage", 2, "elements"), ["R1 in sum 1kV", "R2 sum out 1k",
                                                        "U1 0 sum out"]),
     "stage[2] (user).elements[0]", "1kV"),
    ("duplicate_id", _set(("stage", 1, "id"), "gain"), "stage.id", "gain"),
    ("bad_override_channel", _set(("channel",), {"5": {"gain.r_f": "10k"}}), "channel.5", None),
    ("override_negative", _set(("channel",), {"1": {"gain.r_f": "-1k"}}), "channel.1.gain.r_f",
     "'-1k'"),
    ("bad_space", _set(("space",), "hsv"), "space", "hsv"),
]


@pytest.mark.parametrize("change, key, value", [c[1:] for c in BAD], ids=[c[0] for c in BAD])
def test_refusal_names_file_key_value(tmp_path, change, key, value):
    path = _write(tmp_path, _mutated(change))
    with pytest.raises(ConfigError) as err:
        load_chain(path)
    msg = str(err.value)
    assert str(path) in msg, msg
    assert key in msg, msg
    if value is not None:
        assert value in msg, msg


def test_malformed_toml(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('title = "x"\nspace = \n', encoding="utf-8")
    with pytest.raises(ConfigError) as err:
        load_chain(path)
    msg = str(err.value)
    assert str(path) in msg and "TOML" in msg and "line 2" in msg, msg


def test_not_utf8(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes('title = "caf\xe9"\n'.encode("latin-1"))
    with pytest.raises(ConfigError, match="latin1.toml"):
        load_chain(path)


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere" / "chain.toml"
    with pytest.raises(ConfigError) as err:
        load_chain(path)
    assert str(path) in str(err.value) and "not found" in str(err.value)


def test_demo_chains_load():
    for p in sorted((ROOT / "configs").glob("*.toml")):
        spec = load_chain(p)
        assert spec.stages and spec.path == str(p)


# ---- the command line: exit code and a message, never a traceback ----------------------
CLI_CASES = ["unknown_stage_key", "junction_is_zero_text", "live_min_above_max",
             "bad_card_arity"]


@pytest.mark.parametrize("case", CLI_CASES)
def test_cli_check_refuses_in_process(tmp_path, capsys, case):
    change, key = next((c[1], c[2]) for c in BAD if c[0] == case)
    path = _write(tmp_path, _mutated(change))
    code = main(["check", str(path)])
    err = capsys.readouterr().err
    assert code != 0
    assert "Traceback" not in err and str(path) in err and key in err
    assert len(err.strip().splitlines()) == 1, err


@pytest.mark.parametrize("case", ["unknown_top_key", "rails_reversed", "malformed", "missing"])
def test_cli_check_refuses_subprocess(tmp_path, case):
    if case == "malformed":
        path = tmp_path / "bad.toml"
        path.write_text("[[stage]\n", encoding="utf-8")
    elif case == "missing":
        path = tmp_path / "absent.toml"
    else:
        change = next(c[1] for c in BAD if c[0] == case)
        path = _write(tmp_path, _mutated(change), "bad.toml")
    proc = subprocess.run([sys.executable, "-m", "livecurve.cli", "check", str(path)],
                          capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert proc.returncode != 0
    assert "Traceback" not in proc.stderr, proc.stderr
    assert str(path) in proc.stderr, proc.stderr
    assert proc.stdout == ""
