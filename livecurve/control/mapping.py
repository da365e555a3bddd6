"""From a control source to the value a live circuit parameter wants.

A :class:`ControlMap` takes a control source's volts, optionally through an envelope
follower (:mod:`livecurve.control.envelope`), scales and offsets them, and converts them in
component terms:

* :class:`Linear` — volts to volts (a scaling amplifier).
* :class:`ResistorToCurrent` — a voltage across a resistor into a virtual-ground node:
  I = (V − Vref)/R (Ohm's law), amps.
* :class:`JunctionCurrentSource` — a voltage on a forward-biased junction:
  I = IS·exp(V/(n·VT)), VT = kT/q (Shockley, 1949; the "−1" term is dropped, as for any
  junction biased well into conduction), amps.  k and q are the exact SI values (CODATA 2018).

Where the envelope runs
-----------------------
The envelope follower is a recursive filter, so its value at time t depends on the whole
signal before t.  It runs on a fixed grid of times k / rate from t = 0, starting at rest:
at the source's own sample rate when it has one (audio file, clip soundtrack, live input,
or a sum containing one), otherwise at ``grid_hz`` (48 kHz by default).  Values between grid
points are interpolated linearly; times before 0 read the value at 0.  The grid is processed
in fixed chunks whose starting states are remembered, so a value depends only on t — not on
the order or grouping of the calls — and a seek far into a clip is computed once.  For a live
source the grid stops at the newest sample received, later times hold the newest envelope
value, and samples the ring no longer keeps read as the oldest kept one.
"""

from __future__ import annotations

import math
from collections import OrderedDict

import numpy as np

from livecurve.control.envelope import follow
from livecurve.control.sources import ControlSource, as_times
from livecurve.errors import ConfigError

#: Boltzmann constant, J/K (exact, SI 2019 / CODATA 2018).
BOLTZMANN_J_PER_K = 1.380649e-23
#: Elementary charge, C (exact, SI 2019 / CODATA 2018).
ELEMENTARY_CHARGE_C = 1.602176634e-19
#: Largest exponent a junction converter evaluates (beyond it the current is held), so a
#: wild control voltage gives a huge but finite current instead of inf.
MAX_EXPONENT = 700.0


def thermal_voltage(t_kelvin: float) -> float:
    """VT = k·T/q in volts at junction temperature *t_kelvin* (K)."""
    return BOLTZMANN_J_PER_K * t_kelvin / ELEMENTARY_CHARGE_C


def _num(value, key: str, *, positive: bool = False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ConfigError("expected a number", key=key, value=value) from None
    if not math.isfinite(v) or (positive and v <= 0):
        raise ConfigError("expected a finite number" + (" > 0" if positive else ""),
                          key=key, value=value)
    return v


class Linear:
    """Volts to volts: V_out = scale · V + offset_v.

    Parameters
    ----------
    scale : float, optional
        Voltage gain, V/V.
    offset_v : float, optional
        Output offset, V.
    """

    unit = "V"

    def __init__(self, scale: float = 1.0, offset_v: float = 0.0):
        self.scale = _num(scale, "scale")
        self.offset_v = _num(offset_v, "offset_v")

    def __call__(self, v) -> np.ndarray:
        return self.scale * np.asarray(v, dtype=np.float64) + self.offset_v

    def __repr__(self) -> str:
        return f"Linear(scale={self.scale:g}, offset_v={self.offset_v:g})"


class ResistorToCurrent:
    """Control volts through a resistor into a node held at *v_ref*: I = (V − v_ref)/r_ohm.

    Parameters
    ----------
    r_ohm : float
        Resistance, Ω, > 0.
    v_ref : float, optional
        Voltage of the node the current flows into, V.

    Returns amps when called.
    """

    unit = "A"

    def __init__(self, r_ohm: float, v_ref: float = 0.0):
        self.r_ohm = _num(r_ohm, "r_ohm", positive=True)
        self.v_ref = _num(v_ref, "v_ref")

    def __call__(self, v) -> np.ndarray:
        return (np.asarray(v, dtype=np.float64) - self.v_ref) / self.r_ohm

    def __repr__(self) -> str:
        return f"ResistorToCurrent(r_ohm={self.r_ohm:g}, v_ref={self.v_ref:g})"


class JunctionCurrentSource:
    """Control volts across a junction: I = IS·exp(V/(n·VT)), VT = k·T/q.

    Parameters
    ----------
    is_a : float
        Saturation current IS, A, > 0.
    n : float, optional
        Emission coefficient, > 0.
    t_kelvin : float, optional
        Junction temperature, K, > 0 (default 300.15 K = 27 °C, the SPICE nominal).

    Returns amps when called; exponents above :data:`MAX_EXPONENT` are held there.
    """

    unit = "A"

    def __init__(self, is_a: float, n: float = 1.0, t_kelvin: float = 300.15):
        self.is_a = _num(is_a, "is_a", positive=True)
        self.n = _num(n, "n", positive=True)
        self.t_kelvin = _num(t_kelvin, "t_kelvin", positive=True)
        self.vt_v = thermal_voltage(self.t_kelvin)

    def __call__(self, v) -> np.ndarray:
        x = np.asarray(v, dtype=np.float64) / (self.n * self.vt_v)
        return self.is_a * np.exp(np.minimum(x, MAX_EXPONENT))

    def __repr__(self) -> str:
        return (f"JunctionCurrentSource(is_a={self.is_a:g}, n={self.n:g}, "
                f"t_kelvin={self.t_kelvin:g})")


class _EnvelopeTrack:
    """Envelope of a source on the grid k / rate, computed in chunks (see module notes)."""

    chunk = 4096
    cached_chunks = 32

    def __init__(self, source: ControlSource, rate_hz: float, attack_ms: float,
                 release_ms: float):
        self.source = source
        self.rate_hz = float(rate_hz)
        self.attack_ms = attack_ms
        self.release_ms = release_ms
        self._states = [0.0]  # envelope at the start of chunk k, for every chunk reached
        self._cache: OrderedDict[int, tuple[int, np.ndarray]] = OrderedDict()

    def _available(self) -> int | None:
        if not self.source.is_live:
            return None
        return int(math.floor(self.source.available_until_s() * self.rate_hz + 1e-6))

    def _run(self, k: int, n: int) -> tuple[np.ndarray, float]:
        i = np.arange(k * self.chunk, k * self.chunk + n, dtype=np.float64)
        x = self.source.values_at(i / self.rate_hz)
        return follow(x, rate_hz=self.rate_hz, attack_ms=self.attack_ms,
                      release_ms=self.release_ms, state=self._states[k])

    def _get(self, k: int, n_avail: int | None) -> np.ndarray:
        c = self.chunk
        while len(self._states) <= k:  # chunks before k, in order, complete by construction
            j = len(self._states) - 1
            y, state = self._run(j, c)
            self._remember(j, c, y)
            self._states.append(state)
        valid = c if n_avail is None else min(c, n_avail - k * c)
        hit = self._cache.get(k)
        if hit is not None and hit[0] >= valid:
            self._cache.move_to_end(k)
            return hit[1]
        y, state = self._run(k, valid)
        if valid == c and len(self._states) == k + 1:
            self._states.append(state)
        self._remember(k, valid, y)
        return y

    def _remember(self, k: int, valid: int, y: np.ndarray) -> None:
        self._cache[k] = (valid, y)
        self._cache.move_to_end(k)
        while len(self._cache) > self.cached_chunks:
            self._cache.popitem(last=False)

    def values_at(self, t: np.ndarray) -> np.ndarray:
        flat = t.ravel()
        n_avail = self._available()
        if n_avail is not None and n_avail <= 0:
            return np.zeros(t.shape)
        p = np.maximum(flat * self.rate_hz, 0.0)
        if n_avail is not None:
            p = np.minimum(p, n_avail - 1)
        i0 = np.floor(p).astype(np.int64)
        f = p - i0
        i1 = i0 + 1
        if n_avail is not None:
            i1 = np.minimum(i1, n_avail - 1)
        idx = np.concatenate([i0, i1])
        chunks = idx // self.chunk
        vals = np.empty(idx.size)
        for k in np.unique(chunks):  # ascending: the chunk states extend in order
            sel = chunks == k
            vals[sel] = self._get(int(k), n_avail)[idx[sel] - k * self.chunk]
        a, b = vals[: flat.size], vals[flat.size:]
        return (a + f * (b - a)).reshape(t.shape)


class ControlMap:
    """A control source turned into a circuit parameter's value.

    value(t) = converter(gain · s(t) + offset_v), where s is the source's volts or, with
    *envelope*, their envelope.

    Parameters
    ----------
    source : ControlSource
        Where the control voltage comes from.
    gain : float, optional
        V/V applied after the envelope.
    offset_v : float, optional
        Volts added after the gain.
    envelope : (attack_ms, release_ms) or None, optional
        Follow the rectified source with these time constants (ms) before scaling.
    converter : Linear, ResistorToCurrent, JunctionCurrentSource or None, optional
        Component-level conversion; ``None`` leaves volts.
    grid_hz : float, optional
        Envelope grid rate for sources without a sample rate of their own, Hz.

    Attributes
    ----------
    unit : str
        ``'V'`` or ``'A'``: the unit of the values returned.
    """

    def __init__(self, source: ControlSource, *, gain: float = 1.0, offset_v: float = 0.0,
                 envelope=None, converter=None, grid_hz: float = 48000.0):
        if not isinstance(source, ControlSource):
            raise ConfigError("expected a control source", key="source", value=source)
        self.source = source
        self.gain = _num(gain, "gain")
        self.offset_v = _num(offset_v, "offset_v")
        if converter is not None and not callable(converter):
            raise ConfigError("converter must be Linear, ResistorToCurrent or "
                              "JunctionCurrentSource", key="converter", value=converter)
        self.converter = converter
        self.unit = "V" if converter is None else converter.unit
        self._track = None
        self.envelope = None
        if envelope is not None:
            try:
                attack_ms, release_ms = envelope
            except (TypeError, ValueError):
                raise ConfigError("envelope must be (attack_ms, release_ms)",
                                  key="envelope", value=envelope) from None
            attack_ms = _num(attack_ms, "envelope.attack_ms")
            release_ms = _num(release_ms, "envelope.release_ms")
            if attack_ms < 0 or release_ms < 0:
                raise ConfigError("envelope time constants must be ≥ 0 ms",
                                  key="envelope", value=envelope)
            rate = source.sample_rate_hz or _num(grid_hz, "grid_hz", positive=True)
            self.envelope = (attack_ms, release_ms)
            self._track = _EnvelopeTrack(source, rate, attack_ms, release_ms)

    @property
    def envelope_rate_hz(self) -> float | None:
        """Rate of the grid the envelope runs on, Hz (``None`` without an envelope)."""
        return None if self._track is None else self._track.rate_hz

    def values_at(self, t_s) -> np.ndarray:
        """Parameter values (``unit``) at times *t_s* (s, any shape), float64, same shape."""
        t = as_times(t_s)
        s = self.source.values_at(t) if self._track is None else self._track.values_at(t)
        v = self.gain * s + self.offset_v
        return v if self.converter is None else np.asarray(self.converter(v), np.float64)

    def per_line(self, row_times_s) -> np.ndarray:
        """One value per picture row.

        Parameters
        ----------
        row_times_s : array_like, shape (rows,)
            Time of each row, s from the start of the clip (e.g. frame start + row × line
            period, as the video timing gives).

        Returns
        -------
        ndarray of float64, shape (rows,)
            Values in ``unit``, C-contiguous.
        """
        t = as_times(row_times_s)
        if t.ndim != 1:
            raise ConfigError(f"row times must be 1-D (one per row), got shape {t.shape}",
                              key="row_times_s")
        return np.ascontiguousarray(self.values_at(t))

    def __repr__(self) -> str:
        parts = [self.source.name]
        if self.envelope:
            parts.append(f"envelope={self.envelope}")
        if self.gain != 1.0 or self.offset_v:
            parts.append(f"gain={self.gain:g}, offset_v={self.offset_v:g}")
        if self.converter is not None:
            parts.append(repr(self.converter))
        return f"ControlMap({', '.join(parts)})"
