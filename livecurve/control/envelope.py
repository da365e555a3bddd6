"""Envelope follower: full-wave rectifier into a one-pole smoother with separate attack and
release time constants.

The analog model is the textbook peak-follower: a precision full-wave rectifier |x| charging a
capacitor through one resistance while |x| is above the capacitor voltage (time constant
τa, attack) and discharging it through another when below (τr, release).  Each sample is
handled as an exact step of that RC circuit with the input held for one sample period T
(zero-order hold, step-invariant discretisation):

    a = 1 − exp(−T/τ),      y[n] = y[n−1] + a · (|x[n]| − y[n−1])

with τ = τa when |x[n]| > y[n−1] and τ = τr otherwise.  A unit step applied from a resting
state therefore gives y[n] = 1 − exp(−(n+1)·T/τa), the analog response 1 − exp(−t/τa) at
t = (n+1)·T, and a step down from 1 gives exp(−(n+1)·T/τr).  τ = 0 follows |x| at once.
(The same one-pole with its one-sample delay is what scipy.signal.cont2discrete(...,
method='zoh') gives for 1/(τs + 1).)
"""

from __future__ import annotations

import math

import numba
import numpy as np

from livecurve.errors import ConfigError


def coefficient(tau_ms: float, rate_hz: float) -> float:
    """Step-invariant one-pole coefficient a = 1 − exp(−T/τ) for τ in ms at *rate_hz*.

    Parameters
    ----------
    tau_ms : float
        Time constant, ms, ≥ 0 (0 gives a = 1: no smoothing).
    rate_hz : float
        Sample rate, Hz, > 0.
    """
    if tau_ms == 0.0:
        return 1.0
    return -math.expm1(-1.0 / (rate_hz * tau_ms * 1e-3))


@numba.njit(cache=True)
def _follow(x, a_attack, a_release, y0, out):
    """Rectify and smooth ``x`` (1-D) into ``out`` from state ``y0``; return the last state.

    y[n] = a·|x[n]| + (1 − a)·y[n−1], with 1 − a = exp(−T/τ) formed as 1 − a here; a = 1
    (τ = 0) passes |x| through unchanged.
    """
    b_attack = 1.0 - a_attack
    b_release = 1.0 - a_release
    y = y0
    for i in range(x.size):
        r = abs(x[i])
        if r > y:
            y = a_attack * r + b_attack * y
        else:
            y = a_release * r + b_release * y
        out[i] = y
    return y


def _check_ms(value, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ConfigError("expected a time constant in ms", key=key, value=value) from None
    if not math.isfinite(v) or v < 0:
        raise ConfigError("time constant must be a finite number of ms ≥ 0",
                          key=key, value=value)
    return v


def follow(x, *, rate_hz: float, attack_ms: float, release_ms: float, state=None):
    """Envelope of a sampled signal; streaming-safe.

    Parameters
    ----------
    x : array_like, shape (n,)
        Signal samples (volts or full-scale units); float32 stays float32, anything else is
        computed in float64.
    rate_hz : float
        Sample rate of *x*, Hz, > 0.
    attack_ms, release_ms : float
        Time constants, ms, ≥ 0, used while the rectified input is above / not above the
        envelope.
    state : float, optional
        Envelope value after the previous block (as returned by the previous call); ``None``
        starts at rest (0).

    Returns
    -------
    y : ndarray, shape (n,)
        Envelope, ≥ 0, same units as *x*.
    state : float
        Envelope after the last sample; pass it to the next call so that processing a signal
        in blocks gives exactly the same samples as processing it at once.

    Raises
    ------
    ConfigError
        Bad rate or time constant, non-finite samples or state, or *x* not 1-D.
    """
    try:
        rate = float(rate_hz)
    except (TypeError, ValueError):
        rate = math.nan
    if not math.isfinite(rate) or rate <= 0:
        raise ConfigError("sample rate must be a finite number of Hz > 0",
                          key="rate_hz", value=rate_hz)
    ta = _check_ms(attack_ms, "attack_ms")
    tr = _check_ms(release_ms, "release_ms")
    arr = np.asarray(x)
    dtype = np.float32 if arr.dtype == np.float32 else np.float64
    arr = np.ascontiguousarray(arr, dtype=dtype)
    if arr.ndim != 1:
        raise ConfigError(f"expected a 1-D signal, got shape {arr.shape}", key="x")
    if not np.all(np.isfinite(arr)):
        i = int(np.flatnonzero(~np.isfinite(arr))[0])
        raise ConfigError(f"signal sample {i} is not finite", key="x", value=float(arr[i]))
    y0 = 0.0 if state is None else float(state)
    if not math.isfinite(y0) or y0 < 0:
        raise ConfigError("envelope state must be a finite value ≥ 0", key="state",
                          value=state)
    out = np.empty(arr.size, dtype=dtype)
    last = _follow(arr, coefficient(ta, rate), coefficient(tr, rate), y0, out)
    return out, float(last)
