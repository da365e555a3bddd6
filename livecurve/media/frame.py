"""The decoded picture every source hands out (kept apart so that sources and the camera
import it without importing each other)."""

from __future__ import annotations

import dataclasses

import numpy as np


@dataclasses.dataclass(frozen=True, slots=True)
class Frame:
    """One decoded picture.

    Attributes
    ----------
    index : int
        Frame number in the source (0 = first frame of the file).
    time_s : float
        ``index / fps`` (s).
    rgb : numpy.ndarray, shape (H, W, 3), uint8 or uint16
        Full-range R′G′B′ code values, C-contiguous, owned by the caller.
    lap : int
        Pass number when looping (0 on the first pass).
    """

    index: int
    time_s: float
    rgb: np.ndarray
    lap: int = 0
