"""The ``[limits]`` table of a chain file: pass/fail limits for ``livecurve measure``.

Every key is optional; an absent key takes the default below.  Unknown keys are refused with
their path (``limits.overshot``), values are read with units (``"30MHz"``, ``"5ns"``).

Defaults and where they come from
---------------------------------
=======================  ==========  ===========================================================
key                      default     source
=======================  ==========  ===========================================================
``flatness_db``          0.5         ±0.5 dB to the nominal bandwidth for HD component paths
                                     (common practice, from memory; REFERENCES.md)
``f_3db_min``            0 (format)  0 means the format's nominal bandwidth (30 MHz HD, 5.75 MHz
                                     SD: BT.601 template; HD from memory)
``overshoot_pct``        5.0         common practice (from memory)
``ringing_pct``          5.0         common practice (from memory)
``settling_ns``          0 (off)     no standard value; 0 = not checked
``pulse_bar_pct``        5.0         |pulse-to-bar − 100 %|; common practice (from memory)
``nonlinearity_pct``     1.0         staircase step-height spread; common practice for a linear
                                     path (from memory).  A curve-shaping chain fails this by
                                     design: set the limit it is meant to meet.
``delay_inequality_ns``  5.0         Y′ vs Pb/Pr timing "within a few ns" (common practice,
                                     from memory)
``gain_inequality_pct``  2.0         common practice (from memory)
``level_margin_mv``      35.0        outputs may leave the nominal ±350 mV by 5 % of 700 mV
                                     (EBU R 103 style −5 %…105 % range; from memory)
``dc_offset_mv``         0 (off)     no standard value; 0 = not checked
=======================  ==========  ===========================================================
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, fields
from pathlib import Path

from livecurve.errors import ConfigError
from livecurve.units import parse_value


@dataclass(frozen=True)
class Limits:
    """Pass/fail limits of a measurement report (units in the names; 0 = not checked where
    the module docstring says so)."""

    flatness_db: float = 0.5
    f_3db_min_hz: float = 0.0
    overshoot_pct: float = 5.0
    ringing_pct: float = 5.0
    settling_ns: float = 0.0
    pulse_bar_pct: float = 5.0
    nonlinearity_pct: float = 1.0
    delay_inequality_ns: float = 5.0
    gain_inequality_pct: float = 2.0
    level_margin_mv: float = 35.0
    dc_offset_mv: float = 0.0


#: TOML key → (field name, unit for parse_value).
_KEYS = {
    "flatness_db": ("flatness_db", ""),
    "f_3db_min": ("f_3db_min_hz", "Hz"),
    "overshoot_pct": ("overshoot_pct", ""),
    "ringing_pct": ("ringing_pct", ""),
    "settling_ns": ("settling_ns", ""),
    "pulse_bar_pct": ("pulse_bar_pct", ""),
    "nonlinearity_pct": ("nonlinearity_pct", ""),
    "delay_inequality_ns": ("delay_inequality_ns", ""),
    "gain_inequality_pct": ("gain_inequality_pct", ""),
    "level_margin_mv": ("level_margin_mv", ""),
    "dc_offset_mv": ("dc_offset_mv", ""),
}
assert {v[0] for v in _KEYS.values()} == {f.name for f in fields(Limits)}


def parse_limits(raw: dict | None, *, path: str = "<chain>") -> Limits:
    """Validate a ``[limits]`` table (already parsed from TOML).

    Raises
    ------
    ConfigError
        Not a table, an unknown key (named with its path and the accepted keys), a value
        that is not a number, or a negative one.
    """
    if raw is None:
        return Limits()
    if not isinstance(raw, dict):
        raise ConfigError("expected a table [limits]", path=path, key="limits", value=raw)
    kw = {}
    for key, val in raw.items():
        if key not in _KEYS:
            raise ConfigError(f"unknown key; accepted here: {', '.join(sorted(_KEYS))}",
                              path=path, key=f"limits.{key}", value=val)
        name, unit = _KEYS[key]
        if isinstance(val, bool):
            raise ConfigError("expected a number", path=path, key=f"limits.{key}", value=val)
        v = parse_value(val, unit, key=f"limits.{key}", path=path)
        if not v >= 0:
            raise ConfigError("a limit must be 0 or more", path=path, key=f"limits.{key}",
                              value=val)
        kw[name] = float(v)
    return Limits(**kw)


def load_limits(chain_path) -> Limits:
    """The ``[limits]`` table of a chain file (defaults when it has none)."""
    p = Path(chain_path)
    try:
        raw = tomllib.loads(p.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read limits: {exc}", path=str(p)) from None
    return parse_limits(raw.get("limits"), path=str(p))
