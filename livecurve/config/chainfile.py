"""Chain files: TOML → a validated, immutable :class:`ChainSpec`.

The format is documented with a complete annotated example in ``docs/chain-files.md``.
Every refusal names the file, the key path (``stage[2].r_in``) and the value, and
says what would be accepted.  Unknown keys are refused, so a typo never silently
falls back to a default.
"""

from __future__ import annotations

import contextlib
import math
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.stages import KINDS, LEG_PARAMS, OpampSpec, check_param
from livecurve.errors import ConfigError
from livecurve.signal.component import check_space, check_standard
from livecurve.units import format_value, parse_temperature_k, parse_value

DIODE_KEYS = {"is": ("is_a", "A"), "n": ("n", ""), "rs": ("rs_ohm", "ohm"),
              "eg": ("eg_ev", "eV"), "xti": ("xti", "")}
BJT_KEYS = {"is": ("is_a", "A"), "bf": ("bf", ""), "br": ("br", ""), "nf": ("nf", ""),
            "nr": ("nr", ""), "eg": ("eg_ev", "eV"), "xti": ("xti", ""), "xtb": ("xtb", ""),
            "re": ("re_ohm", "ohm"), "rb": ("rb_ohm", "ohm"), "rc": ("rc_ohm", "ohm")}
DYNAMICS_KEYS = {"gbw": "Hz", "noise_gain": "", "slew": "V/us", "f_ring": "Hz", "zeta": "",
                 "ro": "ohm", "cl": "F"}
TOP_KEYS = {"title", "notes", "space", "standard", "ambient", "format", "supply", "opamp",
            "converter", "stage", "channel", "live", "sweep", "thermal", "control", "limits"}
_ID = re.compile(r"^[a-z][a-z0-9_]*$")
#: Chain files are hand-written text; anything larger is refused before parsing.
MAX_CHAIN_BYTES = 4 << 20


@dataclass(frozen=True)
class StageSpec:
    """One stage as written: kind, SI parameters, junction model, channels it acts on."""

    id: str
    kind: str
    params: dict
    device: DiodeModel | BjtModel | None = None
    legs: tuple = ()
    elements: tuple = ()
    models: dict = field(default_factory=dict)
    channels: tuple = (0, 1, 2)
    dynamics: dict = field(default_factory=dict)
    rth_k_per_w: float = 0.0
    opamp: OpampSpec | None = None  # the stage's own op-amp ([stage.opamp]); None: the chain's


@dataclass(frozen=True)
class LiveSpec:
    """A parameter that can be turned or modulated, with its range."""

    name: str
    stage: str
    param: str
    unit: str
    lo: float
    hi: float
    value: float


@dataclass(frozen=True)
class ChainSpec:
    """A whole chain file, validated. Values are SI floats; temperatures in kelvin."""

    path: str
    title: str
    notes: str
    space: str
    standard: str
    ambient_k: float
    format: str
    opamp: OpampSpec
    converter_bits: int
    converter_legal: bool
    stages: tuple
    overrides: dict  # channel -> {(stage_id, "param" | "device.x" | "legs.i.x"): value}
    live: dict  # name -> LiveSpec
    sweep_v: tuple = (-0.5, 0.5)
    thermal: dict = field(default_factory=dict)
    controls: dict = field(default_factory=dict)  # name -> ControlSpec (config.controls)

    @property
    def standard_or_default(self) -> str:
        """The colour standard, or BT.709 when the file leaves it to the clip (``auto``)."""
        return "bt709" if self.standard == "auto" else self.standard

    def stage(self, sid: str) -> StageSpec:
        for s in self.stages:
            if s.id == sid:
                return s
        raise KeyError(sid)


def load_chain(path) -> ChainSpec:
    """Read and validate a chain file.

    Raises
    ------
    ConfigError
        Missing file, malformed TOML, unknown/missing key or impossible value.
    """
    p = Path(path)
    if not p.is_file():
        raise ConfigError("chain file not found", path=str(p))
    try:
        size = p.stat().st_size
        if size > MAX_CHAIN_BYTES:
            raise ConfigError(f"chain file is {size} bytes; at most {MAX_CHAIN_BYTES} are read",
                              path=str(p))
        # utf-8-sig: a byte-order mark some editors put first is accepted and dropped
        raw = tomllib.loads(p.read_text(encoding="utf-8-sig"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"not valid TOML: {exc}", path=str(p)) from None
    except RecursionError:
        raise ConfigError("not valid TOML here: arrays or tables nested too deeply",
                          path=str(p)) from None
    except OSError as exc:
        raise ConfigError(f"cannot read the chain file: {exc.strerror}", path=str(p)) from None
    try:
        return parse_chain(raw, path=str(p))
    except RecursionError:
        raise ConfigError("values nested too deeply", path=str(p)) from None


def parse_chain(raw: dict, *, path: str = "<chain>") -> ChainSpec:
    """Validate a chain already parsed from TOML (see :func:`load_chain`)."""
    _unknown(raw, TOP_KEYS, "", path)
    space = _req(raw, "space", "", path)
    try:
        space = check_space(space)
        standard = raw.get("standard", "auto")
        standard = "auto" if standard == "auto" else check_standard(standard)
    except ConfigError as exc:
        raise ConfigError(str(exc).split(": ", 1)[-1], path=path, key=exc.key,
                          value=exc.value) from None
    ambient = parse_temperature_k(raw.get("ambient", "25C"), key="ambient", path=path)
    supply = _table(raw, "supply", path)
    _unknown(supply, {"v_pos", "v_neg"}, "supply", path)
    vpos = parse_value(supply.get("v_pos", "12V"), "V", key="supply.v_pos", path=path)
    vneg = parse_value(supply.get("v_neg", "-12V"), "V", key="supply.v_neg", path=path)
    if not vpos > vneg:
        raise ConfigError("supply rails reversed: v_pos must be above v_neg", path=path,
                          key="supply", value=f"v_pos={vpos:g} V, v_neg={vneg:g} V")
    if vpos - vneg > 100:
        raise ConfigError("supply span above 100 V is outside what this tool models",
                          path=path, key="supply", value=vpos - vneg)
    op = parse_opamp(_table(raw, "opamp", path), OpampSpec(v_pos_v=vpos, v_neg_v=vneg),
                     "opamp", path)
    conv = _table(raw, "converter", path)
    _unknown(conv, {"bits", "range"}, "converter", path)
    bits = conv.get("bits", 10)
    if bits not in (8, 10, 12):
        raise ConfigError("converter bits must be 8, 10 or 12", path=path, key="converter.bits",
                          value=bits)
    rng = conv.get("range", "legal")
    if rng not in ("legal", "full"):
        raise ConfigError("converter range must be 'legal' or 'full'", path=path,
                          key="converter.range", value=rng)
    sw = _table(raw, "sweep", path)
    _unknown(sw, {"from", "to"}, "sweep", path)
    sweep = (parse_value(sw.get("from", "-0.5V"), "V", key="sweep.from", path=path),
             parse_value(sw.get("to", "0.5V"), "V", key="sweep.to", path=path))
    if not sweep[1] > sweep[0]:
        raise ConfigError("sweep.to must be above sweep.from", path=path, key="sweep",
                          value=f"from {sw.get('from', '-0.5V')}, to {sw.get('to', '0.5V')}")
    for k, v in zip(("from", "to"), sweep, strict=True):
        if not vneg <= v <= vpos:
            raise ConfigError(f"sweep outside the supply rails {format_value(vneg, 'V')} … "
                              f"{format_value(vpos, 'V')}", path=path, key=f"sweep.{k}",
                              value=sw.get(k))
    stages_raw = raw.get("stage")
    if not isinstance(stages_raw, list) or not stages_raw:
        raise ConfigError("a chain needs at least one [[stage]]", path=path, key="stage")
    stages = tuple(_stage(s, i, path, op) for i, s in enumerate(stages_raw))
    ids = [s.id for s in stages]
    for s in ids:
        if ids.count(s) > 1:
            raise ConfigError("stage id used twice", path=path, key="stage.id", value=s)
    overrides = _overrides(_table(raw, "channel", path), stages, path)
    live = _live(_table(raw, "live", path), stages, path)
    thermal = _table(raw, "thermal", path)
    _unknown(thermal, {"warmup_to", "tau", "speedup"}, "thermal", path)
    th = {}
    if "warmup_to" in thermal:
        th["warmup_to_k"] = parse_temperature_k(thermal["warmup_to"], key="thermal.warmup_to",
                                                path=path)
    if "tau" in thermal:
        th["tau_s"] = parse_value(thermal["tau"], "s", key="thermal.tau", path=path)
        if not th["tau_s"] > 0:
            raise ConfigError("time constant must be above zero", path=path, key="thermal.tau",
                              value=thermal["tau"])
    if "speedup" in thermal:
        th["speedup"] = parse_value(thermal["speedup"], "", key="thermal.speedup", path=path)
        if not th["speedup"] > 0:
            raise ConfigError("speed-up must be above zero", path=path, key="thermal.speedup",
                              value=thermal["speedup"])
    for k in ("title", "notes"):
        if k in raw and not isinstance(raw[k], str):
            raise ConfigError("expected a text in quotes", path=path, key=k,
                              value=None if isinstance(raw[k], dict) else raw[k])
    fmt = raw.get("format", "auto")
    if not isinstance(fmt, str):
        raise ConfigError("format must be a name such as '1080p30' or 'auto'", path=path,
                          key="format", value=fmt)
    from livecurve.config.controls import parse_controls
    controls = parse_controls(_table(raw, "control", path), live, path)
    return ChainSpec(path=path, title=str(raw.get("title", Path(path).stem)),
                     notes=str(raw.get("notes", "")), space=space, standard=standard,
                     ambient_k=ambient, format=fmt, opamp=op, converter_bits=bits,
                     converter_legal=(rng == "legal"), stages=stages, overrides=overrides,
                     live=live, sweep_v=sweep, thermal=th, controls=controls)


# ---- pieces -------------------------------------------------------------------------
@contextlib.contextmanager
def _as_written(written):
    """Re-raise a range check's ConfigError with the value as the file wrote it (``-10k``),
    not the SI float it became (``-10000.0``)."""
    try:
        yield
    except ConfigError as exc:
        if exc.value is None or isinstance(exc.value, str) or isinstance(written, dict):
            raise
        raise ConfigError(exc.reason, path=exc.path, key=exc.key, value=written) from None


def _unknown(d: dict, allowed, where: str, path: str) -> None:
    for k in d:
        if k not in allowed:
            key = f"{where}.{k}" if where else k
            raise ConfigError(f"unknown key; accepted here: {', '.join(sorted(allowed))}",
                              path=path, key=key, value=d[k] if not isinstance(d[k], dict)
                              else None)


def _req(d: dict, k: str, where: str, path: str):
    if k not in d:
        raise ConfigError("missing key", path=path, key=f"{where}.{k}" if where else k)
    return d[k]


def _table(d: dict, k: str, path: str) -> dict:
    v = d.get(k, {})
    if not isinstance(v, dict):
        raise ConfigError("expected a table", path=path, key=k, value=v)
    return v


def parse_device(raw: dict, junction: str, key: str, path: str):
    """A junction model from a ``device`` table; ``junction`` is diode / npn / pnp."""
    if junction == "diode":
        _unknown(raw, DIODE_KEYS, key, path)
        kw = {DIODE_KEYS[k][0]: parse_value(v, DIODE_KEYS[k][1], key=f"{key}.{k}", path=path)
              for k, v in raw.items()}
        return DiodeModel(**kw).check(key, path)
    _unknown(raw, BJT_KEYS, key, path)
    kw = {BJT_KEYS[k][0]: parse_value(v, BJT_KEYS[k][1], key=f"{key}.{k}", path=path)
          for k, v in raw.items()}
    return BjtModel(polarity=junction, **kw).check(key, path)


#: ``[opamp]`` keys → (OpampSpec field, unit kind).
OPAMP_KEYS = {"a_ol": ("a_ol", ""), "headroom": ("headroom_v", "V"), "vos": ("vos_v", "V"),
              "ib_plus": ("ib_plus_a", "A"), "ib_minus": ("ib_minus_a", "A"),
              "ro": ("ro_ohm", "ohm"), "gbw": ("gbw_hz", "Hz")}


def parse_opamp(table: dict, base: OpampSpec, where: str, path: str) -> OpampSpec:
    """An op-amp from an ``[opamp]`` table (chain-wide) or ``[stage.opamp]`` (per stage):
    keys not given keep *base*'s values."""
    if not isinstance(table, dict):
        raise ConfigError("expected a table", path=path, key=where)
    _unknown(table, OPAMP_KEYS, where, path)
    kw = {OPAMP_KEYS[k][0]: parse_value(v, OPAMP_KEYS[k][1], key=f"{where}.{k}", path=path)
          for k, v in table.items()}
    a_ol = kw.get("a_ol", base.a_ol)
    head = kw.get("headroom_v", base.headroom_v)
    if not a_ol > 1:
        raise ConfigError("open-loop gain must be above 1", path=path, key=f"{where}.a_ol",
                          value=a_ol)
    if head < 0 or base.v_pos_v - head <= base.v_neg_v + head:
        raise ConfigError("headroom leaves no output swing between the rails", path=path,
                          key=f"{where}.headroom", value=head)
    for k in ("ro", "gbw"):
        v = kw.get(OPAMP_KEYS[k][0])
        if v is not None and not (v > 0 if k == "gbw" else v >= 0):
            raise ConfigError("must be above zero" if k == "gbw" else "must be zero or more",
                              path=path, key=f"{where}.{k}", value=table[k])
    return replace(base, **kw)


def _stage(raw: dict, i: int, path: str, chain_op: OpampSpec | None = None) -> StageSpec:
    where = f"stage[{i}]"
    if not isinstance(raw, dict):
        raise ConfigError("expected a table", path=path, key=where)
    sid = _req(raw, "id", where, path)
    if not isinstance(sid, str) or not _ID.match(sid):
        raise ConfigError("id must be lower-case letters, digits and _ , starting with a letter",
                          path=path, key=f"{where}.id", value=sid)
    where = f"stage[{i}] ({sid})"
    kind = _req(raw, "kind", where, path)
    common = {"id", "kind", "channels", "dynamics", "rth", "notes", "opamp"}
    stage_op = None
    if "opamp" in raw:
        stage_op = parse_opamp(raw["opamp"], chain_op or OpampSpec(), f"{where}.opamp", path)
    channels = raw.get("channels", [0, 1, 2])
    if (not isinstance(channels, list) or not channels
            or any(c not in (0, 1, 2) for c in channels)):
        raise ConfigError("channels must be a list of 0, 1, 2", path=path,
                          key=f"{where}.channels", value=channels)
    dyn_raw = raw.get("dynamics", {})
    _unknown(dyn_raw, DYNAMICS_KEYS, f"{where}.dynamics", path)
    dyn = {k: parse_value(v, DYNAMICS_KEYS[k], key=f"{where}.dynamics.{k}", path=path)
           for k, v in dyn_raw.items()}
    for k, v in dyn.items():
        if not v > 0:
            raise ConfigError("must be above zero", path=path, key=f"{where}.dynamics.{k}",
                              value=dyn_raw[k])
    rth = parse_value(raw.get("rth", 0.0), "K/W", key=f"{where}.rth", path=path)
    if kind == "netlist":
        _unknown(raw, common | {"elements", "models"}, where, path)
        elements = _req(raw, "elements", where, path)
        if not isinstance(elements, list) or not all(isinstance(e, str) for e in elements):
            raise ConfigError("elements must be a list of element lines", path=path,
                              key=f"{where}.elements")
        models = {}
        for mname, m in _table(raw, "models", path).items():
            mk = f"{where}.models.{mname}"
            if not isinstance(m, dict) or m.get("type") not in ("diode", "npn", "pnp"):
                raise ConfigError("a model needs type = 'diode', 'npn' or 'pnp'", path=path,
                                  key=f"{mk}.type", value=m.get("type") if isinstance(m, dict)
                                  else m)
            models[mname] = parse_device({k: v for k, v in m.items() if k != "type"},
                                         m["type"], mk, path)
        spec = StageSpec(sid, kind, {}, None, (), tuple(elements), models, tuple(channels), dyn,
                         rth, stage_op)
        # build once now so a bad card is refused at load time
        from livecurve.circuit.userdeck import build_user_stage
        build_user_stage(spec.elements, models, OpampSpec(), name=sid,
                         key=f"{where}.elements", path=path)
        return spec
    if not isinstance(kind, str) or kind not in KINDS:
        raise ConfigError(f"unknown stage kind; accepted: {', '.join(KINDS)}, netlist",
                          path=path, key=f"{where}.kind", value=kind)
    sk = KINDS[kind]
    allowed = common | {p.name for p in sk.params}
    if sk.junction:
        allowed |= {"junction", "device"}
    if sk.legs:
        allowed |= {"legs"}
    _unknown(raw, allowed, where, path)
    params = {}
    for prm in sk.params:
        if prm.name in raw:
            v = parse_value(raw[prm.name], prm.unit, key=f"{where}.{prm.name}", path=path)
        elif prm.default is None:
            raise ConfigError(f"missing key ({prm.doc or prm.unit})", path=path,
                              key=f"{where}.{prm.name}")
        else:
            v = prm.default
        if prm.name in raw:
            with _as_written(raw[prm.name]):
                check_param(sk, prm, v, f"{where}.{prm.name}", path)
        params[prm.name] = v
    device = None
    if sk.junction:
        junction = raw.get("junction", "diode")
        if junction not in sk.junction.split("|"):
            raise ConfigError(f"junction must be one of {sk.junction.replace('|', ', ')}",
                              path=path, key=f"{where}.junction", value=junction)
        dev_raw = raw.get("device", {})
        if not isinstance(dev_raw, dict):
            raise ConfigError("expected a table", path=path, key=f"{where}.device")
        device = parse_device(dev_raw, junction, f"{where}.device", path)
    legs = ()
    if sk.legs:
        legs_raw = raw.get("legs", [])
        if not isinstance(legs_raw, list) or not legs_raw:
            raise ConfigError("needs at least one [[stage.legs]] table", path=path,
                              key=f"{where}.legs")
        legs = tuple(_leg(leg, f"{where}.legs[{j}]", path) for j, leg in enumerate(legs_raw))
    return StageSpec(sid, kind, params, device, legs, (), {}, tuple(channels), dyn, rth,
                     stage_op)


def _leg(raw: dict, where: str, path: str) -> dict:
    _unknown(raw, {p.name for p in LEG_PARAMS} | {"direction"}, where, path)
    leg = {}
    for prm in LEG_PARAMS:
        v = parse_value(_req(raw, prm.name, where, path), prm.unit, key=f"{where}.{prm.name}",
                        path=path)
        if prm.sign == 1 and not v > 0:
            raise ConfigError("must be above zero", path=path, key=f"{where}.{prm.name}",
                              value=raw[prm.name])
        leg[prm.name] = v
    d = raw.get("direction", "rising")
    if d not in ("rising", "falling"):
        raise ConfigError("direction must be 'rising' or 'falling'", path=path,
                          key=f"{where}.direction", value=d)
    leg["direction"] = d
    return leg


def param_unit(stage: StageSpec, name: str, path: str, key: str) -> str:
    """Unit kind of an addressable stage parameter (``r_in``, ``device.is``, ``legs.0.v_bias``,
    or a netlist element name)."""
    if stage.kind == "netlist":
        from livecurve.circuit.userdeck import CARD_UNITS, element_values
        vals = element_values(stage.elements)
        if name.lower() in vals:
            return CARD_UNITS[vals[name.lower()][0]]
        raise ConfigError(f"no element '{name}' with a value in netlist stage '{stage.id}'",
                          path=path, key=key, value=name)
    sk = KINDS[stage.kind]
    for prm in sk.params:
        if prm.name == name:
            return prm.unit
    if name.startswith("device.") and stage.device is not None:
        table = DIODE_KEYS if isinstance(stage.device, DiodeModel) else BJT_KEYS
        if name[7:] in table:
            return table[name[7:]][1]
    m = re.match(r"^legs\.(\d+)\.(\w+)$", name)
    if m and int(m.group(1)) < len(stage.legs):
        for prm in LEG_PARAMS:
            if prm.name == m.group(2):
                return prm.unit
    accepted = [p.name for p in sk.params]
    if stage.device is not None:
        accepted.append("device.<model key>")
    if stage.legs:
        accepted.append("legs.<n>.<r_series|r_bias|v_bias>")
    raise ConfigError(f"stage '{stage.id}' ({stage.kind}) has no parameter '{name}'; "
                      f"accepted: {', '.join(accepted)}", path=path, key=key, value=name)


def _split_target(target, stages, path, key):
    if not isinstance(target, str) or "." not in target:
        raise ConfigError("expected '<stage id>.<parameter>'", path=path, key=key, value=target)
    sid, name = target.split(".", 1)
    for s in stages:
        if s.id == sid:
            return s, name
    raise ConfigError(f"no stage with id '{sid}'; stages: {', '.join(s.id for s in stages)}",
                      path=path, key=key, value=target)


def _overrides(raw: dict, stages, path: str) -> dict:
    out = {0: {}, 1: {}, 2: {}}
    for ch, table in raw.items():
        if ch not in ("0", "1", "2"):
            raise ConfigError("channel must be 0, 1 or 2", path=path, key=f"channel.{ch}")
        if not isinstance(table, dict):
            raise ConfigError("expected a table of '<stage>.<param>' = value", path=path,
                              key=f"channel.{ch}")
        for target, val in _flatten(table):
            key = f"channel.{ch}.{target}"
            stage, name = _split_target(target, stages, path, key)
            unit = param_unit(stage, name, path, key)
            v = parse_value(val, unit, key=key, path=path)
            with _as_written(val):
                _check_override(stage, name, v, key, path)
            out[int(ch)][(stage.id, name)] = v
    return out


def _flatten(table: dict, prefix: str = ""):
    """TOML may nest dotted keys written bare (knee.i_ref = ...) — flatten them back."""
    for k, v in table.items():
        name = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            yield from _flatten(v, name)
        else:
            yield name, v


def _check_override(stage: StageSpec, name: str, v: float, key: str, path: str) -> None:
    if stage.kind != "netlist" and name in {p.name for p in KINDS[stage.kind].params}:
        prm = next(p for p in KINDS[stage.kind].params if p.name == name)
        check_param(KINDS[stage.kind], prm, v, key, path)
    elif name.startswith("device."):
        dev = stage.device.scaled(**{
            (DIODE_KEYS if isinstance(stage.device, DiodeModel) else BJT_KEYS)[name[7:]][0]: v})
        dev.check(key.rsplit(".", 2)[0], path)
    elif stage.kind == "netlist" and name.lower().startswith("r") and not v > 0:
        raise ConfigError("a resistance must be above zero ohms", path=path, key=key, value=v)


def _live(raw: dict, stages, path: str) -> dict:
    out = {}
    for name, t in raw.items():
        where = f"live.{name}"
        if not isinstance(t, dict):
            raise ConfigError("expected a table with target, min, max", path=path, key=where)
        _unknown(t, {"target", "min", "max", "value"}, where, path)
        stage, pname = _split_target(_req(t, "target", where, path), stages, path,
                                     f"{where}.target")
        unit = param_unit(stage, pname, path, f"{where}.target")
        lo = parse_value(_req(t, "min", where, path), unit, key=f"{where}.min", path=path)
        hi = parse_value(_req(t, "max", where, path), unit, key=f"{where}.max", path=path)
        if not hi > lo:
            raise ConfigError("max must be above min", path=path, key=where,
                              value=f"min {t['min']}, max {t['max']}")
        with _as_written(t["min"]):
            _check_override(stage, pname, lo, f"{where}.min", path)
        with _as_written(t["max"]):
            _check_override(stage, pname, hi, f"{where}.max", path)
        if "value" in t:
            val = parse_value(t["value"], unit, key=f"{where}.value", path=path)
        else:
            val = nominal_value(stage, pname)
            if val is None or not math.isfinite(val):
                val = 0.5 * (lo + hi)
        if not lo <= val <= hi:
            raise ConfigError(f"value outside min … max ({t['min']} … {t['max']})", path=path,
                              key=f"{where}.value", value=t.get("value", format_value(val, unit)))
        out[name] = LiveSpec(name, stage.id, pname, unit, lo, hi, val)
    return out


def nominal_value(stage: StageSpec, name: str):
    """The value a stage parameter has as written (before overrides and knobs)."""
    if stage.kind == "netlist":
        from livecurve.circuit.userdeck import CARD_UNITS, card_value, element_values
        letter, text = element_values(stage.elements)[name.lower()]
        return card_value(text, CARD_UNITS[letter])
    if name in stage.params:
        return stage.params[name]
    if name.startswith("device."):
        table = DIODE_KEYS if isinstance(stage.device, DiodeModel) else BJT_KEYS
        return getattr(stage.device, table[name[7:]][0])
    m = re.match(r"^legs\.(\d+)\.(\w+)$", name)
    if m:
        return stage.legs[int(m.group(1))][m.group(2)]
    return None
