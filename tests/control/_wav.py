"""Test helper: write known PCM samples as a WAV file with the standard-library ``wave``."""

from __future__ import annotations

import wave

import numpy as np


def write_wav(path, samples: np.ndarray, rate_hz: int) -> np.ndarray:
    """Write int16 *samples* (n,) or (n, channels) as a 16-bit PCM WAV; return them (n, ch)."""
    x = np.asarray(samples, dtype="<i2")
    if x.ndim == 1:
        x = x[:, None]
    with wave.open(str(path), "wb") as w:
        w.setnchannels(x.shape[1])
        w.setsampwidth(2)
        w.setframerate(int(rate_hz))
        w.writeframes(np.ascontiguousarray(x).tobytes())
    return x
