"""``[control.NAME]`` blocks of a chain file: which live parameter a control source
drives, and the mapping from control volts to the parameter (gain, offset, envelope
follower, and a converter in component terms).

Example::

    [control.beat]
    drives = "knee_current"   # a [live.*] name
    source = "clip"           # default source; --control beat=SPEC overrides it
    gain = 0.5                # V/V after the envelope
    offset = "1.2V"
    attack = "5ms"            # envelope follower (give both or neither)
    release = "150ms"
    converter = "resistor"    # volts → amps: I = (V − v_ref)/r
    r = "20k"
    v_ref = "0V"
    rate = "line"             # evaluate per frame, per line or per pixel

Converters: ``volts`` (the value is volts × scale, for knobs in volts or bare numbers),
``resistor`` (I = (V − Vref)/R), ``junction`` (I = IS·exp(V/(n·VT)), a transistor
current source; Shockley).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from livecurve.errors import ConfigError
from livecurve.units import parse_temperature_k, parse_value

RATES = ("frame", "line", "pixel")
CONVERTERS = ("volts", "resistor", "junction")
_KEYS = {"drives", "source", "gain", "offset", "attack", "release", "converter", "r", "v_ref",
         "is", "n", "scale", "rate", "temp"}


@dataclass(frozen=True)
class ControlSpec:
    """A validated control block (source text is parsed later, when it is opened)."""

    name: str
    drives: str
    source: str | None
    gain: float = 1.0
    offset_v: float = 0.0
    envelope: tuple | None = None
    converter: str = "volts"
    r_ohm: float = 0.0
    v_ref: float = 0.0
    is_a: float = 0.0
    n: float = 1.0
    scale: float = 1.0
    t_kelvin: float = 300.15
    rate: str = "line"

    def make_converter(self):
        """The converter object of :mod:`livecurve.control.mapping` (None for plain volts)."""
        from livecurve.control import mapping
        if self.converter == "resistor":
            return mapping.ResistorToCurrent(self.r_ohm, self.v_ref)
        if self.converter == "junction":
            return mapping.JunctionCurrentSource(self.is_a, self.n, self.t_kelvin)
        return mapping.Linear(self.scale) if self.scale != 1.0 else None


def parse_controls(raw: dict, live: dict, path: str) -> dict:
    """Validate every ``[control.NAME]`` block against the chain's live parameters."""
    out = {}
    for name, t in raw.items():
        w = f"control.{name}"
        if not isinstance(t, dict):
            raise ConfigError("expected a table", path=path, key=w)
        for k in t:
            if k not in _KEYS:
                raise ConfigError(f"unknown key; accepted here: {', '.join(sorted(_KEYS))}",
                                  path=path, key=f"{w}.{k}", value=t[k])
        drives = t.get("drives")
        if not isinstance(drives, str) or drives not in live:
            raise ConfigError(f"drives must name a [live.*] parameter; live: "
                              f"{', '.join(live) or 'none'}", path=path, key=f"{w}.drives",
                              value=drives)
        conv = t.get("converter", "volts")
        if not isinstance(conv, str) or conv not in CONVERTERS:
            raise ConfigError(f"converter must be one of {', '.join(CONVERTERS)}", path=path,
                              key=f"{w}.converter", value=conv)
        unit = live[drives].unit
        if conv in ("resistor", "junction") and unit != "A":
            raise ConfigError(f"a {conv} converter gives amps, but '{drives}' is in "
                              f"{unit or 'plain numbers'}", path=path, key=f"{w}.converter",
                              value=conv)
        rate = t.get("rate", "line")
        if not isinstance(rate, str) or rate not in RATES:
            raise ConfigError(f"rate must be one of {', '.join(RATES)}", path=path,
                              key=f"{w}.rate", value=rate)
        env = None
        if ("attack" in t) != ("release" in t):
            raise ConfigError("give both attack and release for an envelope, or neither",
                              path=path, key=w)
        if "attack" in t:
            a = parse_value(t["attack"], "s", key=f"{w}.attack", path=path) * 1e3
            r = parse_value(t["release"], "s", key=f"{w}.release", path=path) * 1e3
            if a < 0 or r < 0:
                raise ConfigError("attack and release must be ≥ 0", path=path, key=w)
            env = (a, r)
        kw = {}
        if conv == "resistor":
            kw["r_ohm"] = parse_value(t.get("r"), "ohm", key=f"{w}.r", path=path)
            if not kw["r_ohm"] > 0:
                raise ConfigError("must be above zero ohms", path=path, key=f"{w}.r",
                                  value=t.get("r"))
            kw["v_ref"] = parse_value(t.get("v_ref", 0.0), "V", key=f"{w}.v_ref", path=path)
        if conv == "junction":
            kw["is_a"] = parse_value(t.get("is", 1e-14), "A", key=f"{w}.is", path=path)
            kw["n"] = parse_value(t.get("n", 1.0), "", key=f"{w}.n", path=path)
            if not (kw["is_a"] > 0 and kw["n"] > 0):
                raise ConfigError("IS and n must be above zero", path=path, key=f"{w}.is",
                                  value=t.get("is"))
            kw["t_kelvin"] = parse_temperature_k(t.get("temp", "27C"), key=f"{w}.temp",
                                                 path=path)
        src = t.get("source")
        if src is not None and not isinstance(src, str):
            raise ConfigError("source must be a text such as 'clip' or 'lfo:sine:2Hz:0.5V'",
                              path=path, key=f"{w}.source", value=src)
        if src is not None:
            src = resolve_file_sources(src, path)
        out[name] = ControlSpec(
            name=name, drives=drives, source=src,
            gain=parse_value(t.get("gain", 1.0), "", key=f"{w}.gain", path=path),
            offset_v=parse_value(t.get("offset", 0.0), "V", key=f"{w}.offset", path=path),
            envelope=env, converter=conv,
            scale=parse_value(t.get("scale", 1.0), "", key=f"{w}.scale", path=path),
            rate=rate, **kw)
    return out


def resolve_file_sources(source: str, chain_path: str) -> str:
    """``file:PATH`` parts of a chain's control source, with a relative PATH made relative to
    the chain file's folder (not to wherever the command is run from)."""
    from livecurve.control.spec import _SPLIT_SUM
    folder = Path(chain_path).parent
    if not Path(chain_path).is_file():
        return source
    parts = _SPLIT_SUM.split(source.strip())
    out = []
    for part in parts:
        kind, sep, rest = part.strip().partition(":")
        if kind.strip().lower() != "file" or not sep:
            out.append(part)
            continue
        fields = rest.split(":")
        opts = [f for f in fields if "=" in f and f.split("=", 1)[0].strip() in
                ("channel", "gain")]
        name = ":".join(f for f in fields if f not in opts).strip()
        if name and not os.path.isabs(os.path.expanduser(name)):
            name = str(folder / name)
        out.append(":".join([f"{kind}", name, *opts]))
    return " + ".join(out)


def default_for_knob(name: str, live_spec, source: str) -> ControlSpec:
    """A control bound straight to a knob from the command line (``--control KNOB=SPEC``):
    control volts −1 … +1 V sweep the knob linearly over its min … max."""
    mid = 0.5 * (live_spec.lo + live_spec.hi)
    half = 0.5 * (live_spec.hi - live_spec.lo)
    return ControlSpec(name=name, drives=name, source=source, gain=half, offset_v=mid,
                       converter="volts", rate="line")
