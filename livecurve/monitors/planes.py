"""The engine-frame contract as the monitors accept it.

An engine frame is a planar float32 array of shape (3, H, W) holding
zero-centred channel volts of one signal space (``"ypbpr"`` or ``"rgb"``,
see :mod:`livecurve.signal.component`).  Adding back
:func:`livecurve.signal.component.centre_offsets_v` gives the real analog
levels: Y′ and R′G′B′ 0…700 mV, Pb/Pr ±350 mV (SMPTE ST 274 analog
interface; the Pb/Pr figure is from memory, see REFERENCES.md).

The helpers here only check arguments and fix dtype and layout; each monitor
module owns its own numba kernel.
"""

from __future__ import annotations

import numpy as np

from livecurve.errors import ConfigError


def check_planes(planes, *, name: str = "planes") -> np.ndarray:
    """Return *planes* as a C-contiguous float32 array of shape (3, H, W).

    Parameters
    ----------
    planes : array_like, shape (3, H, W)
        Zero-centred channel volts.
    name : str
        Argument name used in the error message.

    Raises
    ------
    ConfigError
        If the array is not three planes of at least one pixel, or not real numbers.
    """
    arr = np.asarray(planes)
    if arr.ndim != 3 or arr.shape[0] != 3 or arr.shape[1] < 1 or arr.shape[2] < 1:
        raise ConfigError("expected planar frame of shape (3, H, W) with H, W >= 1",
                          key=name, value=getattr(arr, "shape", None))
    if not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
        raise ConfigError("expected real numbers (volts)", key=name, value=str(arr.dtype))
    return np.ascontiguousarray(arr, dtype=np.float32)


def check_out(out, shape: tuple[int, ...], dtype, *, name: str = "out") -> np.ndarray:
    """Return *out* if it fits, else a new uninitialised buffer (kernels fill every element).

    Parameters
    ----------
    out : ndarray or None
        Caller's buffer to reuse.  It must have exactly *shape* and *dtype* and be
        C-contiguous and writable.
    shape : tuple of int
    dtype : numpy dtype

    Raises
    ------
    ConfigError
        If *out* is given but does not fit.
    """
    if out is None:
        return np.empty(shape, dtype=dtype)
    if not isinstance(out, np.ndarray):
        raise ConfigError("expected a numpy array or None", key=name, value=type(out).__name__)
    if out.shape != tuple(shape) or out.dtype != np.dtype(dtype):
        raise ConfigError(f"buffer must have shape {tuple(shape)} and dtype {np.dtype(dtype)}",
                          key=name, value=(out.shape, str(out.dtype)))
    if not out.flags.c_contiguous or not out.flags.writeable:
        raise ConfigError("buffer must be C-contiguous and writable", key=name, value=out.shape)
    return out


def check_positive_int(value, *, name: str, minimum: int = 1, maximum: int | None = None) -> int:
    """Return *value* as int if it is an integer within [minimum, maximum], else raise."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ConfigError("expected an integer", key=name, value=value)
    v = int(value)
    if v < minimum or (maximum is not None and v > maximum):
        hi = "" if maximum is None else f" and <= {maximum}"
        raise ConfigError(f"expected an integer >= {minimum}{hi}", key=name, value=value)
    return v


def check_range_v(value, *, name: str) -> np.ndarray:
    """Return a per-channel (low, high) volt range as float64 array of shape (3, 2).

    Accepts shape (3, 2) or a single (low, high) pair used for all channels.
    Each low must be below its high and both finite.
    """
    arr = np.asarray(value, dtype=np.float64)
    if arr.shape == (2,):
        arr = np.tile(arr, (3, 1))
    if arr.shape != (3, 2):
        raise ConfigError("expected per-channel (low, high) volts of shape (3, 2) or (2,)",
                          key=name, value=np.shape(value))
    if not np.all(np.isfinite(arr)) or not np.all(arr[:, 0] < arr[:, 1]):
        raise ConfigError("each channel needs finite low < high volts", key=name,
                          value=arr.tolist())
    return np.ascontiguousarray(arr)


#: Below this many samples a monitor kernel runs on one thread.  Waking numba's worker
#: threads costs microseconds on an idle machine but milliseconds when other processes
#: (a decoder, an encoder) hold both cores, which outweighs the work on a small frame.
PARALLEL_MIN_SAMPLES = 1 << 16


def use_threads(n_samples: int) -> bool:
    """True when a kernel over *n_samples* samples should run its parallel twin."""
    return n_samples >= PARALLEL_MIN_SAMPLES
