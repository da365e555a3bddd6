"""Synthetic engine frames for the monitor tests (planar float32, zero-centred volts)."""

from __future__ import annotations

import numpy as np

from livecurve.signal.component import Y_SPAN_V, centre_offsets_v, rgb_to_ypbpr_matrix

#: Bars left to right with R′G′B′ at full amplitude (scaled by the bar amplitude).
BARS = (
    ("white", (1.0, 1.0, 1.0)),
    ("yellow", (1.0, 1.0, 0.0)),
    ("cyan", (0.0, 1.0, 1.0)),
    ("green", (0.0, 1.0, 0.0)),
    ("magenta", (1.0, 0.0, 1.0)),
    ("red", (1.0, 0.0, 0.0)),
    ("blue", (0.0, 0.0, 1.0)),
)


def rgb_frame(rgb01: np.ndarray, *, space: str, standard: str = "bt709") -> np.ndarray:
    """Engine planes from interleaved R′G′B′ (H, W, 3) in 0…1.

    Y′PbPr through the standard's matrix (ITU-R BT.709 etc.), scaled to the
    700 mV analog swing, then zero-centred with ``centre_offsets_v``.
    """
    rgb = np.asarray(rgb01, dtype=np.float64)
    if space == "ypbpr":
        comp = np.einsum("ij,hwj->ihw", rgb_to_ypbpr_matrix(standard), rgb)
    else:
        comp = np.moveaxis(rgb, 2, 0)
    volts = comp * Y_SPAN_V - np.array(centre_offsets_v(space))[:, None, None]
    return np.ascontiguousarray(volts, dtype=np.float32)


def bars_rgb(*, amplitude: float = 0.75, height: int = 8, bar_width: int = 10) -> np.ndarray:
    """Interleaved R′G′B′ (H, 7·bar_width, 3) of white + six coloured bars at *amplitude*."""
    img = np.zeros((height, bar_width * len(BARS), 3))
    for i, (_, rgb) in enumerate(BARS):
        img[:, i * bar_width:(i + 1) * bar_width] = amplitude * np.array(rgb)
    return img


def grey_for_luminance(l_cd_m2: float, *, white_cd_m2: float = 200.0) -> float:
    """Normalised grey level E′ whose BT.1886 luminance (black 0) is *l_cd_m2*.

    Inverse of L = Lw·E′^2.4 (ITU-R BT.1886 with Lb = 0).
    """
    return (l_cd_m2 / white_cd_m2) ** (1 / 2.4)
