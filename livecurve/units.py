"""Values with units as engineers write them: ``"10k"``, ``"4k7"``, ``"4.7uA"``,
``"2.2n"``, ``"-12V"``, ``"35C"``, ``"1meg"``.

SI prefixes (BIPM SI Brochure, 9th ed.): f p n u/µ m k M G T, plus SPICE's ``meg``.
``m`` is milli and ``M`` is mega, as on schematics (SPICE itself is case-blind and
needs ``meg``; livecurve accepts both ``M`` and ``meg``).  The "R notation"
(``4k7`` = 4.7 k, ``2R2`` = 2.2) is common practice on schematics and BOMs.

Every parser returns a plain SI float (ohms, amps, volts, farads, hertz,
seconds, kelvin) and raises :class:`~livecurve.errors.UnitError` naming the
key and the value when it cannot.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

from livecurve.errors import UnitError

_PREFIX = {
    "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3,
    "": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "meg": 1e6, "Meg": 1e6, "MEG": 1e6,
    "G": 1e9, "T": 1e12,
}

#: Unit symbols accepted for each quantity (the symbol may be omitted).
UNITS = {
    "ohm": ("ohm", "ohms", "Ω", "R", "r"),
    "A": ("A",),
    "V": ("V",),
    "F": ("F",),
    "H": ("H",),
    "Hz": ("Hz",),
    "s": ("s",),
    "W": ("W",),
    "K/W": ("K/W", "C/W", "°C/W"),
    "V/us": ("V/us", "V/µs"),
    "eV": ("eV",),
    "": ("",),
}

_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PREFIXES = "meg|Meg|MEG|[fpnuµμmkKMGT]"
_RE_PLAIN = re.compile(rf"^\s*({_NUM})\s*({_PREFIXES})?\s*([A-Za-zΩ°/]*)\s*$")
# R notation: the prefix (or R) stands where the decimal point goes: 4k7, 2R2, 1M5.
_RE_RNOT = re.compile(r"^\s*([+-]?)(\d+)(meg|[fpnuµmkKMGR])(\d+)\s*([A-Za-zΩ]*)\s*$")


def parse_value(value, unit: str = "", *, key: str | None = None, path: str | None = None) -> float:
    """Read a number with an optional SI prefix and unit symbol.

    Parameters
    ----------
    value : str or float or int
        ``"10k"``, ``"4.7uA"``, ``"-12V"``, ``"4k7"``, ``1e-6`` …
    unit : str
        Expected quantity, a key of :data:`UNITS` (``"ohm"``, ``"A"``, ``"V"``, ``"F"``,
        ``"Hz"``, ``"s"``, ``"W"``, ``"K/W"``, ``"V/us"``, ``"eV"``, or ``""`` for a
        bare number).  A unit symbol in the text must match it.
    key, path : str, optional
        Where the value came from, for the error message.

    Returns
    -------
    float
        The value in SI base units (``"V/us"`` values are returned in V/µs as written).
    """
    if isinstance(value, bool):
        raise UnitError(f"expected a number{_unit_hint(unit)}, got a boolean", key=key,
                        path=path, value=value)
    if isinstance(value, (int, float)):
        try:
            x = float(value)
        except OverflowError:  # a whole number with hundreds of digits
            raise UnitError("value is too large to be a number of this tool", key=key,
                            path=path, value=_short(value)) from None
    elif isinstance(value, str):
        x = _parse_text(value, unit, key=key, path=path)
    else:
        raise UnitError(f"expected a number{_unit_hint(unit)}", key=key, path=path, value=value)
    if not math.isfinite(x):
        raise UnitError("value must be finite", key=key, path=path, value=value)
    return x


def _unit_hint(unit: str) -> str:
    return f" in {unit} (e.g. '10k', '4.7u{unit}')" if unit else ""


def _parse_text(text: str, unit: str, *, key, path) -> float:
    accepted = UNITS.get(unit)
    if accepted is None:
        raise ValueError(f"unknown unit kind {unit!r}")
    # A unit symbol written in full at the end ("300K/W", "4.7uA") is taken off first, so
    # a symbol that starts with a prefix letter (K/W) is not read as a prefix.
    t = text.strip()
    for sym in sorted((a for a in accepted if a), key=len, reverse=True):
        if len(t) > len(sym) and t.endswith(sym):
            head = re.match(rf"^({_NUM})\s*({_PREFIXES})?\s*$", t[:-len(sym)].strip())
            if head:
                return _scaled(head.group(1), _PREFIX[head.group(2) or ""])
            break
    m = _RE_RNOT.match(text)
    if m:
        sign, whole, pfx, frac, sym = m.groups()
        mult = 1.0 if pfx == "R" else _PREFIX[pfx]
        _check_symbol(sym, unit, accepted, text, key, path)
        x = _scaled(f"{whole}.{frac}", mult)
        return -x if sign == "-" else x
    m = _RE_PLAIN.match(text)
    if not m:
        raise UnitError(f"cannot read this as a number{_unit_hint(unit)}", key=key, path=path,
                        value=text)
    num, pfx, sym = m.group(1), m.group(2) or "", m.group(3)
    # "mA" reads as prefix m + symbol A; a lone prefix letter ("10m") is a prefix.
    _check_symbol(sym, unit, accepted, text, key, path)
    return _scaled(num, _PREFIX[pfx])


def _scaled(num: str, mult: float) -> float:
    """num × mult rounded once, so "200u" is the double nearest 200e-6 (not 200 × 1e-6).

    An exponent beyond what a double holds gives ±inf or 0 (refused later as not finite)
    instead of the decimal module's overflow error.
    """
    try:
        return float(Decimal(num) * Decimal(repr(mult)))
    except ArithmeticError:  # decimal.Overflow / InvalidOperation on huge exponents
        return float(num) * mult


def _short(value) -> str:
    """A value for an error message, shortened when it is hundreds of characters long."""
    text = str(value)
    return text if len(text) <= 40 else f"{text[:20]}…({len(text)} characters)"


def _check_symbol(sym: str, unit: str, accepted, text, key, path) -> None:
    if sym == "" or sym in accepted:
        return
    if sym.lower() in {a.lower() for a in accepted if a}:
        return
    want = "/".join(a for a in accepted if a) or "no unit"
    raise UnitError(f"unit '{sym}' does not fit here; expected {want}", key=key, path=path,
                    value=text)


#: Temperatures accepted everywhere, kelvin: −55 °C … +150 °C, the widest range small-signal
#: silicon parts are specified over (common practice); the junction laws are fitted near 27 °C.
T_MIN_K, T_MAX_K = 218.15, 423.15


def parse_temperature_k(value, *, key: str | None = None, path: str | None = None) -> float:
    """Read a temperature (``"35C"``, ``"35 °C"``, ``"308.15K"``, or a bare number in °C).

    Returns
    -------
    float
        Kelvin, within −55 °C … +150 °C (:data:`T_MIN_K` … :data:`T_MAX_K`).
    """
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        try:
            t = float(value) + 273.15
        except OverflowError:
            t = math.inf
    elif isinstance(value, str):
        m = re.match(rf"^\s*({_NUM})\s*(°?C|K|degC)?\s*$", value)
        if not m:
            raise UnitError("cannot read this as a temperature (e.g. '35C' or '300K')",
                            key=key, path=path, value=value)
        t = float(m.group(1))
        t = t if m.group(2) == "K" else t + 273.15
    else:
        raise UnitError("expected a temperature (e.g. '35C')", key=key, path=path, value=value)
    if not (math.isfinite(t) and T_MIN_K - 1e-9 <= t <= T_MAX_K + 1e-9):
        raise UnitError("temperature outside −55 … +150 °C, the range the junction models "
                        "are used over", key=key, path=path, value=_short(value))
    return min(max(t, T_MIN_K), T_MAX_K)  # -55C + 273.15 rounds just below T_MIN_K


def format_value(x: float, unit: str = "") -> str:
    """Format an SI value with an engineering prefix, e.g. ``4.7e-6, 'A'`` → ``'4.7 µA'``."""
    if x == 0 or not math.isfinite(x):
        return f"{x:g} {unit}".strip()
    exp3 = int(math.floor(math.log10(abs(x)) / 3))
    exp3 = max(-5, min(4, exp3))
    sym = {-5: "f", -4: "p", -3: "n", -2: "µ", -1: "m", 0: "", 1: "k", 2: "M", 3: "G", 4: "T"}
    return f"{x / 10 ** (3 * exp3):.4g} {sym[exp3]}{'Ω' if unit == 'ohm' else unit}".strip()
