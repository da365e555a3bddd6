"""docs/chain-files.md promises required keys, defaults and signal levels: each promise is
checked here against what the loader, the stage library and the level code actually do."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.stages import KINDS
from livecurve.config.chainfile import BJT_KEYS, DIODE_KEYS, parse_chain
from livecurve.errors import ConfigError
from livecurve.signal.levels import codes_to_volts
from livecurve.units import parse_temperature_k, parse_value

DOC = Path(__file__).resolve().parents[2] / "docs" / "chain-files.md"


def _section(title: str) -> str:
    text = DOC.read_text(encoding="utf-8")
    start = text.index(f"## {title}\n")
    end = text.find("\n## ", start + 4)
    return text[start:end if end > 0 else None]


def _tables(section: str) -> list[list[list[str]]]:
    """Every markdown table of *section*: rows of cells (header and rule left out)."""
    tables, rows = [], []
    for line in section.splitlines() + [""]:
        if line.startswith("|"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            if not set("".join(cells)) <= set("-: "):
                rows.append(cells)
        elif rows:
            tables.append(rows[1:])  # drop the header
            rows = []
    return tables


def _ticked(cell: str) -> str | None:
    m = re.match(r"^`([^`]*)`", cell)
    return m.group(1).strip('"') if m else None


MINIMAL = {"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "1k",
                                      "r_f": "1k"}]}


@pytest.fixture(scope="module")
def chains():
    base = parse_chain(MINIMAL, path="/somewhere/minimal.toml")
    logc = parse_chain({"space": "ypbpr", "stage": [
        {"id": "k", "kind": "log_transdiode", "r_in": "10k", "i_ref": "50u"}],
        "live": {"knee": {"target": "k.i_ref", "min": "10u", "max": "200u"}},
        "control": {"plain": {"drives": "knee"},
                    "res": {"drives": "knee", "converter": "resistor", "r": "10k"},
                    "jct": {"drives": "knee", "converter": "junction"}}}, path="log.toml")
    return base, logc


def _chain_defaults(base, logc) -> dict:
    """Documented key → (value the code gives, parser of the documented text)."""
    st = base.stages[0]
    plain, res, jct = (logc.controls[k] for k in ("plain", "res", "jct"))

    def V(s):
        return parse_value(s, "V")

    def num(s):
        return parse_value(s, "")

    return {
        "standard": (base.standard, str), "ambient": (base.ambient_k, parse_temperature_k),
        "format": (base.format, str),
        "supply.v_pos": (base.opamp.v_pos_v, V), "supply.v_neg": (base.opamp.v_neg_v, V),
        "opamp.a_ol": (base.opamp.a_ol, num), "opamp.headroom": (base.opamp.headroom_v, V),
        "converter.bits": (base.converter_bits, int),
        "converter.range": ("legal" if base.converter_legal else "full", str),
        "sweep.from": (base.sweep_v[0], V), "sweep.to": (base.sweep_v[1], V),
        "stage.channels": (list(st.channels), lambda s: [int(x) for x in s.strip("[]")
                                                         .split(",")]),
        "stage.junction": ("diode" if isinstance(logc.stages[0].device, DiodeModel)
                           else "bjt", str),
        "stage.rth": (st.rth_k_per_w, num),
        "control.gain": (plain.gain, num), "control.offset": (plain.offset_v, V),
        "control.converter": (plain.converter, str), "control.scale": (plain.scale, num),
        "control.rate": (plain.rate, str), "control.v_ref": (res.v_ref, V),
        "control.is": (jct.is_a, lambda s: parse_value(s, "A")), "control.n": (jct.n, num),
        "control.temp": (jct.t_kelvin, parse_temperature_k),
    }


def test_chain_wide_defaults_match_the_loader(chains):
    base, logc = chains
    rows = _tables(_section("Required keys and defaults"))[0]
    have = _chain_defaults(base, logc)
    seen = set()
    for key, default in rows:
        k = key.strip("`")
        seen.add(k)
        if k in have:
            value, parse = have[k]
            assert value == parse(_ticked(default)), (k, default, value)
    # the rows written in words
    assert base.title == "minimal" and base.notes == ""
    assert logc.live["knee"].value == pytest.approx(50e-6)  # the stage's own i_ref
    assert set(have) | {"title", "notes", "live.value"} == seen


def test_stage_parameter_defaults_match_the_library():
    rows = _tables(_section("Required keys and defaults"))[1]
    documented = {}
    for param, kinds, default in rows:
        for kind in re.findall(r"`(\w+)`", kinds):
            documented[(kind, param.strip("`"))] = default
    in_code = {(k, p.name): p for k, sk in KINDS.items() for p in sk.params}
    assert set(documented) == set(in_code)  # every parameter of every kind, nothing else
    for (kind, name), default in documented.items():
        p = in_code[(kind, name)]
        if default == "required":
            assert p.default is None, (kind, name)
        else:
            assert p.default == parse_value(_ticked(default), p.unit), (kind, name, default)


@pytest.mark.parametrize("kind", [k for k, sk in KINDS.items()])
def test_required_parameters_are_refused_when_missing(kind):
    required = [p.name for p in KINDS[kind].params if p.default is None]
    stage = {"id": "s", "kind": kind, **{n: "10k" for n in required}}
    if KINDS[kind].legs:
        stage["legs"] = [{"r_series": "10k", "r_bias": "10k", "v_bias": "1V"}]
    parse_chain({"space": "rgb", "stage": [stage]})  # with them: loads
    for n in required:
        broken = {k: v for k, v in stage.items() if k != n}
        with pytest.raises(ConfigError, match=rf"key 'stage\[0\] \(s\)\.{n}'.*missing key"):
            parse_chain({"space": "rgb", "stage": [broken]})


def test_required_top_level_keys():
    with pytest.raises(ConfigError, match="key 'space'"):
        parse_chain({"stage": MINIMAL["stage"]})
    with pytest.raises(ConfigError, match="at least one"):
        parse_chain({"space": "rgb"})


def test_junction_model_defaults_match_the_models():
    rows = _tables(_section("Required keys and defaults"))[2]
    diode, bjt = DiodeModel(), BjtModel(polarity="npn")
    keys = set()
    for key, d_cell, b_cell in rows:
        k = key.strip("`")
        keys.add(k)
        for cell, table, model in ((d_cell, DIODE_KEYS, diode), (b_cell, BJT_KEYS, bjt)):
            if cell == "—":
                assert k not in table
            else:
                attr, unit = table[k]
                assert getattr(model, attr) == parse_value(_ticked(cell), unit), (k, cell)
    assert keys == set(DIODE_KEYS) | set(BJT_KEYS)


def test_leg_direction_default():
    text = _section("Required keys and defaults")
    assert '`direction` defaults to `"rising"`' in text
    spec = parse_chain({"space": "rgb", "stage": [
        {"id": "b", "kind": "breakpoint_shaper", "r_in": "10k", "r_f": "10k",
         "legs": [{"r_series": "10k", "r_bias": "10k", "v_bias": "1V"}]}]})
    assert spec.stages[0].legs[0]["direction"] == "rising"


def test_signal_levels_are_centred_volts():
    text = _section("Signal levels: centred volts")
    assert "black is −350 mV, mid-grey 0 V and white +350 mV" in text
    assert "Pb and Pr span −350 … +350 mV" in text
    codes = np.array([[[0, 0, 0], [255, 255, 255], [0, 0, 255], [255, 0, 0]]], dtype=np.uint8)
    for std in ("bt601", "bt709", "bt2020"):
        v = codes_to_volts(codes, space="ypbpr", standard=std)
        np.testing.assert_allclose(v[0, 0, :2], [-0.35, 0.35], atol=1e-6)  # Y′ black, white
        np.testing.assert_allclose(v[1:, 0, :2], 0.0, atol=1e-6)  # grey: no colour
        assert v[1, 0, 2] == pytest.approx(0.35, abs=1e-6)  # blue: Pb at its extent
        assert v[2, 0, 3] == pytest.approx(0.35, abs=1e-6)  # red: Pr at its extent
    rgb = codes_to_volts(codes, space="rgb", standard="bt709")
    np.testing.assert_allclose(rgb[:, 0, 0], -0.35, atol=1e-6)
    np.testing.assert_allclose(rgb[:, 0, 1], 0.35, atol=1e-6)


def test_junction_key_named_junction_everywhere():
    table = _section("Stage kinds")
    for line in table.splitlines():
        if line.startswith("| `soft_limiter`") or line.startswith("| `breakpoint_shaper`"):
            assert "`junction`" in line and ", diode" not in line
    for kind, sk in KINDS.items():
        if sk.junction:
            row = next(ln for ln in table.splitlines() if ln.startswith(f"| `{kind}`"))
            assert "`junction`" in row, kind
