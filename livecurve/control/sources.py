"""Control-voltage sources: constants, low-frequency oscillators, sums and audio files.

A control source is anything that answers ``values_at(t_s)``: the control voltage, in
volts, at absolute times in seconds from the start of the clip.  File, clip, constant and
oscillator sources are pure functions of time, so a render gives the same result however it
is cut into segments; live input (:mod:`livecurve.control.live`) offers the same interface.

Sources
-------
* Oscillator waveforms are the textbook periodic functions (sine; triangle and square with
  the sine's zero crossings and peaks; rising ramp).
* The ``steps`` shape draws one value per period from the SplitMix64 generator
  (G. L. Steele, D. Lea, C. H. Flood, "Fast splittable pseudorandom number generators",
  OOPSLA 2014), evaluated as a counter-based hash, so any time can be asked in any order.
* Audio is decoded by the ffmpeg executable bundled with ``imageio-ffmpeg`` to 32-bit float
  PCM at 48 kHz in a WAV stream (RIFF/WAVE format tags 3 and 0xFFFE) and read back by linear
  interpolation; full scale (±1.0) maps to ±``gain_v_per_fs`` volts.

The command-line grammar for sources lives in :mod:`livecurve.control.spec`.
"""

from __future__ import annotations

import math
import os
import struct
import subprocess
import tempfile

import numba
import numpy as np

from livecurve.errors import ConfigError, MediaError

#: Sample rate, Hz, at which audio files are decoded and held.
AUDIO_RATE_HZ = 48000
#: Oscillator shapes accepted by :class:`Lfo`.
LFO_SHAPES = ("sine", "triangle", "square", "ramp", "steps")

_GOLDEN = 0x9E3779B97F4A7C15
#: Fraction of a sample period within which a time counts as falling on the sample itself
#: (k / rate · rate is not always exactly k in floating point).
_SNAP = 1e-6


def as_times(t_s) -> np.ndarray:
    """Return *t_s* as a float64 C-contiguous array, rejecting non-finite times.

    Parameters
    ----------
    t_s : array_like of float, any shape
        Absolute times in seconds from the start of the clip.
    """
    t = np.asarray(t_s, dtype=np.float64, order="C")
    if not np.all(np.isfinite(t)):
        bad = t[~np.isfinite(t)].ravel()[0]
        raise ConfigError("control times must be finite seconds", key="t_s", value=float(bad))
    return t


class ControlSource:
    """Base of every control source.

    Attributes
    ----------
    name : str
        Short description, written in the ``--control`` grammar where one exists.
    sample_rate_hz : float or None
        Native sample rate of a sampled source (audio), ``None`` for analytic sources.
    is_live : bool
        ``True`` when samples arrive from a device while the program runs.
    """

    name = "source"
    sample_rate_hz: float | None = None
    is_live = False

    def values_at(self, t_s) -> np.ndarray:
        """Control volts at times *t_s* (seconds, float64 array of any shape), same shape."""
        raise NotImplementedError

    def available_until_s(self) -> float:
        """Latest time, seconds, up to which samples are known (``inf`` unless live)."""
        return math.inf

    def __add__(self, other: ControlSource) -> Sum:
        return Sum([self, other])

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.name}>"


def _finite(value, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ConfigError("expected a number", key=key, value=value) from None
    if not math.isfinite(v):
        raise ConfigError("expected a finite number", key=key, value=value)
    return v


def _fmt(v: float) -> str:
    return f"{v:.6g}"


class Constant(ControlSource):
    """A fixed control voltage.

    Parameters
    ----------
    volts : float
        Control voltage, V.
    """

    def __init__(self, volts: float):
        self.volts = _finite(volts, "volts")
        self.name = f"const:{_fmt(self.volts)}V"

    def values_at(self, t_s) -> np.ndarray:
        t = as_times(t_s)
        return np.full(t.shape, self.volts, dtype=np.float64)


# --------------------------------------------------------------------------- oscillator

@numba.njit(cache=True)
def _splitmix64(seed, k):
    """SplitMix64 output number ``k + 1`` of the stream seeded with *seed* (both int64).

    Steele, Lea & Flood (2014): state += 0x9E3779B97F4A7C15, then the two xor-shift-multiply
    rounds.  Evaluated directly from the counter so it needs no sequential state.
    """
    z = np.uint64(seed) + (np.uint64(k) + np.uint64(1)) * np.uint64(_GOLDEN)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@numba.njit(cache=True)
def _lfo(t, shape, rate_hz, amp_v, offset_v, phase_cycles, seed, out):
    """Oscillator values at times ``t`` (1-D float64) into ``out``.

    shape codes: 0 sine, 1 triangle, 2 square, 3 ramp, 4 steps.  With phase
    φ = rate·t + phase and f = φ − ⌊φ⌋ (one period = one unit of φ):
    sine sin(2πf); triangle 4f, 2 − 4f, 4f − 4 on [0, ¼), [¼, ¾), [¾, 1);
    square +1 on [0, ½), −1 on [½, 1); ramp 2·frac(f + ½) − 1 (rising, 0 at f = 0);
    steps 2u − 1 with u uniform on [0, 1) from SplitMix64 output number ⌊φ⌋ + 1.
    """
    two_pi = 2.0 * math.pi
    for i in range(t.size):
        ph = rate_hz * t[i] + phase_cycles
        k = math.floor(ph)
        f = ph - k
        if shape == 0:
            w = math.sin(two_pi * f)
        elif shape == 1:
            if f < 0.25:
                w = 4.0 * f
            elif f < 0.75:
                w = 2.0 - 4.0 * f
            else:
                w = 4.0 * f - 4.0
        elif shape == 2:
            w = 1.0 if f < 0.5 else -1.0
        elif shape == 3:
            g = f + 0.5
            if g >= 1.0:
                g -= 1.0
            w = 2.0 * g - 1.0
        else:
            z = _splitmix64(seed, np.int64(k))
            u = np.float64(z >> np.uint64(11)) * (1.0 / 9007199254740992.0)
            w = 2.0 * u - 1.0
        out[i] = offset_v + amp_v * w


class Lfo(ControlSource):
    """Low-frequency oscillator.

    Parameters
    ----------
    shape : {'sine', 'triangle', 'square', 'ramp', 'steps'}
        Waveform.  ``triangle`` and ``square`` share the sine's zero crossings and peaks;
        ``ramp`` rises from −1 to +1 through 0 at phase 0; ``steps`` holds a random value in
        [−1, 1) for each period, the same for the same *seed* however it is queried.
    rate_hz : float
        Oscillator frequency (for ``steps``: new values per second), Hz, ≥ 0.
    amplitude_v : float
        Peak deviation from *offset_v*, V.
    offset_v : float, optional
        Centre voltage, V.
    phase_deg : float, optional
        Phase at t = 0, degrees (360° = one period).
    seed : int, optional
        Seed of the ``steps`` generator (0 … 2⁶³ − 1).
    """

    def __init__(self, shape: str = "sine", rate_hz: float = 1.0, amplitude_v: float = 1.0,
                 offset_v: float = 0.0, phase_deg: float = 0.0, seed: int = 0):
        if shape not in LFO_SHAPES:
            raise ConfigError(f"unknown oscillator shape; accepted: {', '.join(LFO_SHAPES)}",
                              key="shape", value=shape)
        self.shape = shape
        self.rate_hz = _finite(rate_hz, "rate_hz")
        if self.rate_hz < 0:
            raise ConfigError("oscillator rate must be ≥ 0 Hz", key="rate_hz", value=rate_hz)
        self.amplitude_v = _finite(amplitude_v, "amplitude_v")
        self.offset_v = _finite(offset_v, "offset_v")
        self.phase_deg = _finite(phase_deg, "phase_deg")
        if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) \
                or not 0 <= int(seed) < 2**63:
            raise ConfigError("seed must be an integer in 0 … 2**63-1", key="seed", value=seed)
        self.seed = int(seed)
        parts = [f"lfo:{shape}:{_fmt(self.rate_hz)}Hz:{_fmt(self.amplitude_v)}V"]
        if self.offset_v:
            parts.append(f"offset={_fmt(self.offset_v)}V")
        if self.phase_deg:
            parts.append(f"phase={_fmt(self.phase_deg)}deg")
        if self.seed:
            parts.append(f"seed={self.seed}")
        self.name = ":".join(parts)

    def values_at(self, t_s) -> np.ndarray:
        t = as_times(t_s)
        out = np.empty(t.size, dtype=np.float64)
        _lfo(t.ravel(), LFO_SHAPES.index(self.shape), self.rate_hz, self.amplitude_v,
             self.offset_v, self.phase_deg / 360.0, np.int64(self.seed), out)
        return out.reshape(t.shape)


class Sum(ControlSource):
    """The sum of several sources' voltages.

    Parameters
    ----------
    sources : sequence of ControlSource
        At least one source.  The sum's native rate is the highest rate among them
        (``None`` when all are analytic); it is live when any part is.
    """

    def __init__(self, sources):
        parts = []
        for i, s in enumerate(sources):
            if not isinstance(s, ControlSource):
                raise ConfigError("each part of a sum must be a control source",
                                  key=f"sources[{i}]", value=s)
            parts.extend(s.sources if isinstance(s, Sum) else [s])
        if not parts:
            raise ConfigError("a sum needs at least one source", key="sources", value=[])
        self.sources = tuple(parts)
        rates = [s.sample_rate_hz for s in parts if s.sample_rate_hz is not None]
        self.sample_rate_hz = max(rates) if rates else None
        self.is_live = any(s.is_live for s in parts)
        self.name = "+".join(s.name for s in parts)

    def values_at(self, t_s) -> np.ndarray:
        t = as_times(t_s)
        total = np.zeros(t.shape, dtype=np.float64)
        for s in self.sources:
            total += s.values_at(t)
        return total

    def available_until_s(self) -> float:
        return min(s.available_until_s() for s in self.sources)


# --------------------------------------------------------------------------- audio file

@numba.njit(cache=True)
def _interp_zero_outside(samples, rate_hz, gain, t, out):
    """Linear interpolation of ``samples`` (1-D) taken at k / rate; 0 before 0 and after end.

    The signal is taken as samples[0 … n−1] with zeros at indices −1 and n, so the value
    ramps to 0 over one sample period at each end and is 0 beyond.  Positions within
    ``_SNAP`` of a sample index read that sample exactly.
    """
    n = samples.size
    for i in range(t.size):
        p = t[i] * rate_hz
        if p <= -1.0 or p >= n:
            out[i] = 0.0
            continue
        k = math.floor(p + 0.5)
        f = p - k
        if abs(f) < _SNAP:  # t = k/rate computed in floating point: read sample k exactly
            f = 0.0
        elif f < 0.0:
            k -= 1
            f += 1.0
        k = np.int64(k)
        a = samples[k] if 0 <= k < n else 0.0
        b = samples[k + 1] if 0 <= k + 1 < n else 0.0
        out[i] = gain * (a + f * (b - a))


def _read_exact(stream, n: int) -> bytes:
    buf = b""
    while len(buf) < n:
        piece = stream.read(n - len(buf))
        if not piece:
            break
        buf += piece
    return buf


def _wav_channels(stream) -> int | None:
    """Read a RIFF/WAVE header from *stream* up to the start of the data; return channels."""
    head = _read_exact(stream, 12)
    if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
        return None
    channels = None
    while True:
        ck = _read_exact(stream, 8)
        if len(ck) < 8:
            return None
        cid, size = ck[:4], struct.unpack("<I", ck[4:])[0]
        if cid == b"data":
            return channels
        body = _read_exact(stream, size + (size & 1))
        if cid == b"fmt ":
            tag, channels = struct.unpack("<HH", body[:4])
            bits = struct.unpack("<H", body[14:16])[0]
            if tag not in (3, 0xFFFE) or bits != 32:
                return None


def decode_audio(path, *, channel="mix", rate_hz: int = AUDIO_RATE_HZ) -> np.ndarray:
    """Decode the first audio stream of *path* to one float32 signal at *rate_hz*.

    Parameters
    ----------
    path : str or os.PathLike
        Any file the bundled ffmpeg reads (WAV, FLAC, MP3, a video clip's soundtrack …).
    channel : 'mix' or int
        ``'mix'`` averages all channels; an integer picks one (0 = first).
    rate_hz : int
        Output sample rate, Hz (ffmpeg resamples).

    Returns
    -------
    ndarray of float32, shape (n,)
        Samples in full-scale units (±1.0).

    Raises
    ------
    MediaError
        Missing or unreadable file, no audio stream, no samples, or too few channels.
    """
    import imageio_ffmpeg

    p = os.fspath(path)
    if not os.path.isfile(p):
        raise MediaError(f"{p}: audio file not found")
    exe = imageio_ffmpeg.get_ffmpeg_exe()
    cmd = [exe, "-nostdin", "-v", "error", "-i", p, "-map", "0:a:0", "-vn", "-sn", "-dn",
           "-f", "wav", "-c:a", "pcm_f32le", "-ar", str(int(rate_hz)), "-"]
    pieces = []
    with tempfile.TemporaryFile() as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=err, stdin=subprocess.DEVNULL)
        try:
            channels = _wav_channels(proc.stdout)
            if channels is not None:
                if channel != "mix" and not 0 <= channel < channels:
                    raise MediaError(f"{p}: has {channels} audio channel(s); "
                                     f"channel {channel} does not exist")
                frame = 4 * channels
                rest = b""
                while True:
                    block = proc.stdout.read(1 << 20)
                    if not block:
                        break
                    block = rest + block
                    cut = len(block) - len(block) % frame
                    rest = block[cut:]
                    x = np.frombuffer(block[:cut], dtype="<f4").reshape(-1, channels)
                    pieces.append(x.mean(axis=1, dtype=np.float64).astype(np.float32)
                                  if channel == "mix" else x[:, channel].copy())
        finally:
            proc.stdout.close()
            rc = proc.wait()
        err.seek(0)
        msg = err.read().decode("utf-8", "replace").strip().splitlines()
    if rc != 0 or channels is None:
        why = msg[-1] if msg else f"ffmpeg exit status {rc}"
        if "matches no streams" in " ".join(msg):
            why = "no audio stream"
        raise MediaError(f"{p}: cannot decode audio ({why})")
    samples = np.concatenate(pieces) if pieces else np.empty(0, np.float32)
    if samples.size == 0:
        raise MediaError(f"{p}: audio stream has no samples")
    if not np.all(np.isfinite(samples)):
        raise MediaError(f"{p}: decoded audio contains non-finite samples")
    return np.ascontiguousarray(samples, dtype=np.float32)


class AudioFile(ControlSource):
    """An audio file (or a clip's soundtrack) as a control voltage.

    The whole stream is decoded once, at construction, to 48 kHz float32; ``values_at``
    interpolates linearly between samples and gives 0 V before the start and past the end.

    Parameters
    ----------
    path : str or os.PathLike
        Audio or video file readable by ffmpeg.
    channel : 'mix' or int, optional
        ``'mix'`` (mean of all channels) or a channel index (0 = left/first).
    gain_v_per_fs : float, optional
        Control volts for a full-scale sample (1.0).

    Attributes
    ----------
    samples : ndarray of float32, shape (n,)
        Decoded samples, full-scale units.
    duration_s : float
        ``n / 48000``.
    """

    sample_rate_hz = float(AUDIO_RATE_HZ)

    def __init__(self, path, *, channel="mix", gain_v_per_fs: float = 1.0):
        if channel != "mix" and (isinstance(channel, bool)
                                 or not isinstance(channel, (int, np.integer)) or channel < 0):
            raise ConfigError("channel must be 'mix' or a channel index ≥ 0",
                              key="channel", value=channel)
        self.path = os.fspath(path)
        self.channel = channel if channel == "mix" else int(channel)
        self.gain_v_per_fs = _finite(gain_v_per_fs, "gain_v_per_fs")
        self.samples = decode_audio(self.path, channel=self.channel)
        self.duration_s = self.samples.size / AUDIO_RATE_HZ
        opts = "" if self.channel == "mix" else f":channel={self.channel}"
        if self.gain_v_per_fs != 1.0:
            opts += f":gain={_fmt(self.gain_v_per_fs)}V"
        self.name = f"file:{self.path}{opts}"

    def values_at(self, t_s) -> np.ndarray:
        t = as_times(t_s)
        out = np.empty(t.size, dtype=np.float64)
        _interp_zero_outside(self.samples, self.sample_rate_hz, self.gain_v_per_fs, t.ravel(), out)
        return out.reshape(t.shape)

