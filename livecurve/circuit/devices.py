"""Device models and their temperature laws (SPICE level-1 diode, Gummel–Poon BJT DC).

Sources
-------
* Shockley junction law I = IS·(exp(V/(N·VT)) − 1), VT = kT/q — W. Shockley (1949).
* Diode saturation current vs temperature (Berkeley SPICE / ngspice diode model)::

      IS(T) = IS·exp[(T/Tnom − 1)·EG/(N·VT) + (XTI/N)·ln(T/Tnom)]

* BJT (Berkeley SPICE / ngspice Gummel–Poon, with VAF = IKF = ISE = ISC = ∞/0, i.e.
  the Ebers–Moll transport model)::

      IS(T) = IS·exp[(T/Tnom − 1)·EG/VT + XTI·ln(T/Tnom)]     (no /N)
      BF(T) = BF·(T/Tnom)^XTB,  BR(T) = BR·(T/Tnom)^XTB

* Constants: ngspice 39 uses CODATA 2014 k = 1.38064852e-23 J/K and
  q = 1.6021766208e-19 C; we use the same so that a deck and the engine agree to
  the microvolt (REFERENCES.md).  TNOM defaults to 27 °C = 300.15 K.
* Defaults (SPICE): diode IS = 1e-14 A, N = 1; BJT IS = 1e-16 A, BF = 100, BR = 1,
  NF = NR = 1; EG = 1.11 eV, XTI = 3, XTB = 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from livecurve.errors import ConfigError

K_BOLTZMANN = 1.38064852e-23  # J/K (CODATA 2014, as ngspice 39)
Q_ELECTRON = 1.6021766208e-19  # C (CODATA 2014, as ngspice 39)
T_NOM_K = 300.15  # SPICE default TNOM, 27 °C
#: Conductance SPICE puts across every junction (GMIN), siemens.
GMIN_S = 1e-12


def thermal_voltage(t_kelvin: float) -> float:
    """VT = k·T/q in volts (25.852 mV at 300 K)."""
    return K_BOLTZMANN * t_kelvin / Q_ELECTRON


@dataclass(frozen=True)
class DiodeModel:
    """SPICE level-1 diode, DC part.

    Attributes
    ----------
    is_a : float
        Saturation current IS at TNOM, amps (> 0).
    n : float
        Emission coefficient (ideality) N, dimensionless (> 0).
    rs_ohm : float
        Series (bulk) resistance RS, ohms (≥ 0).
    eg_ev : float
        Activation energy EG, electron-volts.
    xti : float
        Saturation-current temperature exponent XTI.
    """

    is_a: float = 1e-14
    n: float = 1.0
    rs_ohm: float = 0.0
    eg_ev: float = 1.11
    xti: float = 3.0

    def check(self, key: str = "diode", path: str | None = None) -> DiodeModel:
        """Refuse impossible values (IS ≤ 0, N ≤ 0, RS < 0), naming *key*."""
        _positive(self.is_a, f"{key}.is", path)
        _positive(self.n, f"{key}.n", path)
        _nonneg(self.rs_ohm, f"{key}.rs", path)
        _positive(self.eg_ev, f"{key}.eg", path)
        return self

    def is_at(self, t_kelvin: float) -> float:
        """IS(T) in amps per the SPICE diode temperature law."""
        vt = thermal_voltage(t_kelvin)
        ratio = t_kelvin / T_NOM_K
        return self.is_a * math.exp((ratio - 1.0) * self.eg_ev / (self.n * vt)
                                    + self.xti / self.n * math.log(ratio))

    def scaled(self, **changes) -> DiodeModel:
        return replace(self, **changes)


@dataclass(frozen=True)
class BjtModel:
    """SPICE Gummel–Poon BJT, DC transport (Ebers–Moll) part.

    Attributes
    ----------
    polarity : str
        ``"npn"`` or ``"pnp"``.
    is_a : float
        Transport saturation current IS at TNOM, amps (> 0).
    bf, br : float
        Ideal forward / reverse beta (> 0).
    nf, nr : float
        Forward / reverse emission coefficients (> 0).
    eg_ev, xti, xtb : float
        Energy gap (eV), IS temperature exponent, beta temperature exponent.
    re_ohm, rb_ohm, rc_ohm : float
        Emitter, base, collector ohmic resistances (≥ 0).
    """

    polarity: str = "npn"
    is_a: float = 1e-16
    bf: float = 100.0
    br: float = 1.0
    nf: float = 1.0
    nr: float = 1.0
    eg_ev: float = 1.11
    xti: float = 3.0
    xtb: float = 0.0
    re_ohm: float = 0.0
    rb_ohm: float = 0.0
    rc_ohm: float = 0.0

    def check(self, key: str = "bjt", path: str | None = None) -> BjtModel:
        """Refuse impossible values, naming *key*."""
        if self.polarity not in ("npn", "pnp"):
            raise ConfigError("polarity must be 'npn' or 'pnp'", path=path,
                              key=f"{key}.polarity", value=self.polarity)
        for name in ("is_a", "bf", "br", "nf", "nr", "eg_ev"):
            _positive(getattr(self, name), f"{key}.{name.split('_')[0]}", path)
        for name in ("re_ohm", "rb_ohm", "rc_ohm"):
            _nonneg(getattr(self, name), f"{key}.{name.split('_')[0]}", path)
        return self

    def is_at(self, t_kelvin: float) -> float:
        """IS(T) in amps per the SPICE Gummel–Poon temperature law (no division by NF)."""
        vt = thermal_voltage(t_kelvin)
        ratio = t_kelvin / T_NOM_K
        return self.is_a * math.exp((ratio - 1.0) * self.eg_ev / vt + self.xti * math.log(ratio))

    def beta_factor(self, t_kelvin: float) -> float:
        """(T/Tnom)^XTB, multiplying BF and BR."""
        return (t_kelvin / T_NOM_K) ** self.xtb

    def scaled(self, **changes) -> BjtModel:
        return replace(self, **changes)


def _positive(x: float, key: str, path: str | None) -> None:
    if not (x > 0.0) or not math.isfinite(x):
        raise ConfigError("must be a finite value above zero", path=path, key=key, value=x)


def _nonneg(x: float, key: str, path: str | None) -> None:
    if not (x >= 0.0) or not math.isfinite(x):
        raise ConfigError("must be a finite value of zero or more", path=path, key=key,
                          value=x)
