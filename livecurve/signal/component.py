"""Analog component-video levels and the R′G′B′ ↔ Y′PbPr matrices.

Sources
-------
* Luma weights Kr, Kb (Kg = 1 − Kr − Kb): ITU-R BT.601, BT.709-6, BT.2020.
* Colour-difference scaling Pb = (B′−Y′)/(2(1−Kb)), Pr = (R′−Y′)/(2(1−Kr)): same.
* Analog levels Y′ 0…700 mV above blanking, Pb/Pr ±350 mV: SMPTE ST 274 analog
  interface (Pb/Pr figure from memory, see REFERENCES.md).

Everything in the engine is zero-centred: Y′ and R′G′B′ planes are shifted down
by 350 mV so each channel spans ±350 mV nominal; Pb/Pr are already centred.
"""

from __future__ import annotations

import numpy as np

from livecurve.errors import ConfigError

#: Luma weights (Kr, Kb) per colour standard.
_KR_KB = {
    "bt601": (0.299, 0.114),
    "bt709": (0.2126, 0.0722),
    "bt2020": (0.2627, 0.0593),
}
STANDARDS = tuple(_KR_KB)
SPACES = ("ypbpr", "rgb")

#: Nominal analog swing of Y′ (and of each R′G′B′ channel), volts.
Y_SPAN_V = 0.700
#: Nominal analog peak of Pb and Pr, volts (±).
C_PEAK_V = 0.350


def check_standard(standard: str) -> str:
    """Return *standard* lower-cased, or raise ConfigError naming the accepted ones."""
    s = str(standard).lower().replace(".", "").replace("-", "")
    if s not in _KR_KB:
        raise ConfigError(f"unknown colour standard; accepted: {', '.join(STANDARDS)}",
                          key="standard", value=standard)
    return s


def check_space(space: str) -> str:
    """Return *space* lower-cased, or raise ConfigError naming the accepted ones."""
    s = str(space).lower().replace("′", "").replace("'", "")
    if s not in SPACES:
        raise ConfigError(f"unknown signal space; accepted: {', '.join(SPACES)}",
                          key="space", value=space)
    return s


def luma_weights(standard: str) -> tuple[float, float, float]:
    """(Kr, Kg, Kb) of a colour standard (ITU-R BT.601 / BT.709 / BT.2020)."""
    kr, kb = _KR_KB[check_standard(standard)]
    return kr, 1.0 - kr - kb, kb


def rgb_to_ypbpr_matrix(standard: str) -> np.ndarray:
    """3×3 matrix taking R′G′B′ (0…1) to Y′ (0…1), Pb, Pr (±0.5).

    Returns
    -------
    ndarray, shape (3, 3), float64
    """
    kr, kg, kb = luma_weights(standard)
    return np.array([
        [kr, kg, kb],
        [-0.5 * kr / (1 - kb), -0.5 * kg / (1 - kb), 0.5],
        [0.5, -0.5 * kg / (1 - kr), -0.5 * kb / (1 - kr)],
    ])


def ypbpr_to_rgb_matrix(standard: str) -> np.ndarray:
    """Inverse of :func:`rgb_to_ypbpr_matrix`, shape (3, 3).

    Written out from the same definitions (R′ = Y′ + 2(1−Kr)·Pr, B′ = Y′ + 2(1−Kb)·Pb,
    G′ = (Y′ − Kr·R′ − Kb·B′)/Kg) rather than inverted numerically, so the Y′ column is exactly
    1 and a grey (Pb = Pr = 0) comes back with R′ = G′ = B′ = Y′ bit for bit.
    """
    kr, kg, kb = luma_weights(standard)
    return np.array([
        [1.0, 0.0, 2.0 * (1 - kr)],
        [1.0, -2.0 * kb * (1 - kb) / kg, -2.0 * kr * (1 - kr) / kg],
        [1.0, 2.0 * (1 - kb), 0.0],
    ])


def centre_offsets_v(space: str) -> tuple[float, float, float]:
    """Volts subtracted from each channel to zero-centre it before the chain.

    Y′ and R′G′B′ channels (0…700 mV) are shifted by 350 mV; Pb/Pr (±350 mV) by 0.
    """
    if check_space(space) == "ypbpr":
        return (Y_SPAN_V / 2, 0.0, 0.0)
    return (Y_SPAN_V / 2,) * 3


def channel_names(space: str) -> tuple[str, str, str]:
    """Display names of the three channels of a signal space."""
    return ("Y′", "Pb", "Pr") if check_space(space) == "ypbpr" else ("R′", "G′", "B′")


def legal_range_v(space: str) -> np.ndarray:
    """Nominal component range of each channel in *centred* volts, shape (3, 2)."""
    check_space(space)
    return np.array([[-C_PEAK_V, C_PEAK_V]] * 3)
