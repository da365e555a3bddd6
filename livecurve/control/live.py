"""Live audio input as a control source, through PortAudio (python-sounddevice).

Hardware sits behind a seam: PortAudio calls :meth:`LiveInput._callback` from its own thread,
and that callback only copies the block into a preallocated ring buffer and advances a write
counter.  Everything else — mixing channels, interpolating, envelopes — runs in the video
loop's thread when it asks for values.

Time is counted in samples received, not by the wall clock: sample k of the stream is at
t = k / rate_hz seconds after the stream started.  A device that delivers samples faster or
slower than real time (a file-backed ALSA device, a drifting clock) therefore still gives
each sample a fixed time.  Times beyond the newest sample hold the newest value; times older
than the ring keeps hold the oldest value still kept.

Sources
-------
* PortAudio callback model and status flags (paInputOverflow …): PortAudio V19 API
  (``Pa_OpenStream``, ``PaStreamCallbackFlags``), as exposed by python-sounddevice
  (``InputStream``, ``CallbackFlags``).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numba
import numpy as np

from livecurve.control.sources import _SNAP, ControlSource, as_times
from livecurve.errors import ConfigError, DeviceError

try:  # PortAudio is a system library: report its absence when a device is asked for
    import sounddevice as _sd
    _SD_ERROR = None
except (OSError, ImportError) as exc:  # pragma: no cover - depends on the machine
    _sd = None
    _SD_ERROR = exc


#: Ring sample formats and their full-scale values.
_FORMATS = {"float32": 1.0, "int16": 32768.0}


def _portaudio():
    if _sd is None:
        raise DeviceError(f"live audio input needs the PortAudio library "
                          f"(Debian package libportaudio2): {_SD_ERROR}")
    return _sd


def list_inputs() -> list[tuple[int, str, int, float]]:
    """Audio devices that can capture.

    Returns
    -------
    list of (index, name, channels, default_rate)
        PortAudio device index, device name, maximum input channels, default sample rate
        in Hz.  The list is the one PortAudio saw when it started (devices plugged in later
        appear after a restart of the program).
    """
    sd = _portaudio()
    out = []
    for d in sd.query_devices():
        if d["max_input_channels"] > 0:
            out.append((int(d["index"]), str(d["name"]), int(d["max_input_channels"]),
                        float(d["default_samplerate"])))
    return out


def _describe(inputs) -> str:
    if not inputs:
        return "no capture devices exist"
    return "capture devices: " + "; ".join(f"{i}: {n} ({c} ch, {r:g} Hz)"
                                            for i, n, c, r in inputs)


def find_input(spec) -> tuple[int, str, int, float]:
    """Find a capture device by PortAudio index or by case-insensitive part of its name.

    Parameters
    ----------
    spec : int or str
        An index (``3`` or ``"3"``) or a name fragment (``"usb mic"``).  An exact name
        wins over fragments; a fragment must match exactly one device.

    Returns
    -------
    (index, name, channels, default_rate)
        As in :func:`list_inputs`.

    Raises
    ------
    DeviceError
        No such device, or a fragment matching several; the message lists the devices that
        do exist.
    """
    inputs = list_inputs()
    if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool) or \
            isinstance(spec, str) and spec.strip().isdigit():
        idx = int(spec)
        for d in inputs:
            if d[0] == idx:
                return d
        raise DeviceError(f"audio input {idx} does not exist or cannot capture; "
                          f"{_describe(inputs)}")
    if not isinstance(spec, str) or not spec.strip():
        raise DeviceError(f"audio input {spec!r} is not an index or a name; "
                          f"{_describe(inputs)}")
    want = spec.strip().lower()
    exact = [d for d in inputs if d[1].lower() == want]
    if exact:
        return exact[0]
    hits = [d for d in inputs if want in d[1].lower()]
    if len(hits) == 1:
        return hits[0]
    if hits:
        raise DeviceError(f"audio input name {spec!r} matches several devices; "
                          f"use an index. {_describe(hits)}")
    raise DeviceError(f"no audio input named {spec!r}; {_describe(inputs)}")


@dataclass(frozen=True)
class LiveStatus:
    """What a live input has been through.

    Attributes
    ----------
    state : str
        ``'idle'`` (not started), ``'running'``, ``'stopped'`` (by the program) or
        ``'lost'`` (the stream ended without being asked: device unplugged or failed).
    samples_received : int
        Sample frames written into the ring since the start.
    overflows : int
        Callbacks in which PortAudio reported that input was dropped (input overflow).
    skipped : int
        Samples that :meth:`LiveInput.read_block` could not return because the ring had
        already overwritten them (the reader fell behind).
    starved : int
        Samples that :meth:`LiveInput.read_block` filled by holding the last value because
        they had not arrived before its timeout.
    """

    state: str
    samples_received: int
    overflows: int
    skipped: int
    starved: int

    @property
    def ok(self) -> bool:
        """True while nothing was lost, dropped or held."""
        return self.state in ("idle", "running", "stopped") and not (
            self.overflows or self.skipped or self.starved)

    def __str__(self) -> str:
        return (f"{self.state}: {self.samples_received} samples, {self.overflows} overflow(s), "
                f"{self.skipped} skipped, {self.starved} held")


@numba.njit(cache=True)
def _ring_read(ring, lo, hi, rate_hz, channel, gain, t, out):
    """Linear interpolation of ring samples at times ``t`` (1-D) into ``out``.

    Absolute sample index k lives at row k % len(ring).  Positions are clamped to the
    samples lo … hi−1 still held; channel −1 averages all channels; ``gain`` includes the
    full-scale division for integer rings.
    """
    cap = ring.shape[0]
    nch = ring.shape[1]
    last = hi - 1
    for i in range(t.size):
        p = t[i] * rate_hz
        if p <= lo:
            p = lo
        elif p >= last:
            p = last
        k = np.int64(math.floor(p + 0.5))
        f = p - k
        if abs(f) < _SNAP:  # t = k/rate in floating point: read sample k exactly
            f = 0.0
        elif f < 0.0:
            k -= 1
            f += 1.0
        k2 = k + 1 if k < last else k
        r1 = k % cap
        r2 = k2 % cap
        if channel >= 0:
            a = np.float64(ring[r1, channel])
            b = np.float64(ring[r2, channel])
        else:
            a = 0.0
            b = 0.0
            for c in range(nch):
                a += np.float64(ring[r1, c])
                b += np.float64(ring[r2, c])
            a /= nch
            b /= nch
        out[i] = gain * (a + f * (b - a))


@numba.njit(cache=True)
def _ring_copy(ring, start, count, channel, gain, out):
    """Copy samples start … start+count−1 (absolute indices) of the ring into ``out``."""
    cap = ring.shape[0]
    nch = ring.shape[1]
    for i in range(count):
        r = (start + i) % cap
        if channel >= 0:
            out[i] = gain * np.float64(ring[r, channel])
        else:
            acc = 0.0
            for c in range(nch):
                acc += np.float64(ring[r, c])
            out[i] = gain * (acc / nch)


class LiveInput(ControlSource):
    """A live capture device as a control source.

    Parameters
    ----------
    device : int or str
        PortAudio index or name fragment (see :func:`find_input`).
    rate_hz : float, optional
        Sample rate to open the device at, Hz.
    channels : int, optional
        Channels to open.
    seconds : float, optional
        Length of the ring buffer, s: how far back ``values_at`` can look.
    channel : 'mix' or int, optional
        Which channel gives the control voltage (``'mix'`` = mean of all).
    gain_v_per_fs : float, optional
        Control volts for a full-scale sample (1.0).
    blocksize : int, optional
        Frames per callback (0 lets PortAudio choose).
    sample_format : {'float32', 'int16'}, optional
        Sample format asked of PortAudio and kept in the ring.  ``'int16'`` (full scale
        32768) suits devices whose native format it is and avoids a conversion in the driver.

    Notes
    -----
    The stream opens on :meth:`start` (or ``with LiveInput(...) as src:``).  Before the
    first sample every value is 0 V.
    """

    is_live = True

    def __init__(self, device, *, rate_hz: float = 48000, channels: int = 1,
                 seconds: float = 4.0, channel="mix", gain_v_per_fs: float = 1.0,
                 blocksize: int = 0, sample_format: str = "float32"):
        sd = _portaudio()
        if sample_format not in _FORMATS:
            raise ConfigError(f"sample format must be one of {', '.join(_FORMATS)}",
                              key="sample_format", value=sample_format)
        self.index, self.device_name, max_ch, _ = find_input(device)
        rate = float(rate_hz)
        if not math.isfinite(rate) or rate <= 0:
            raise ConfigError("sample rate must be > 0 Hz", key="rate_hz", value=rate_hz)
        if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) \
                or not 1 <= channels <= max_ch:
            raise DeviceError(f"audio input {self.index} ({self.device_name}) has {max_ch} "
                              f"input channel(s); cannot open {channels!r}")
        if channel != "mix" and (isinstance(channel, bool)
                                 or not isinstance(channel, (int, np.integer))
                                 or not 0 <= channel < channels):
            raise ConfigError(f"channel must be 'mix' or an index below channels={channels}",
                              key="channel", value=channel)
        seconds = float(seconds)
        if not math.isfinite(seconds) or seconds <= 0:
            raise ConfigError("ring length must be > 0 s", key="seconds", value=seconds)
        try:
            sd.check_input_settings(device=self.index, channels=int(channels),
                                    samplerate=rate, dtype=sample_format)
        except Exception as exc:  # PortAudioError or ValueError from the driver
            raise DeviceError(f"audio input {self.index} ({self.device_name}) refuses "
                              f"{channels} channel(s) at {rate:g} Hz: {exc}") from None
        self.sample_rate_hz = rate
        self.channels = int(channels)
        self.channel = channel if channel == "mix" else int(channel)
        self.gain_v_per_fs = float(gain_v_per_fs)
        if not math.isfinite(self.gain_v_per_fs):
            raise ConfigError("expected a finite number", key="gain_v_per_fs",
                              value=gain_v_per_fs)
        self.blocksize = int(blocksize)
        self.capacity = max(int(math.ceil(seconds * rate)), 1024)
        self._guard = self.capacity // 8  # rows the reader leaves to the writer
        self.sample_format = sample_format
        self._ring = np.zeros((self.capacity, self.channels), dtype=sample_format)
        self._scale = self.gain_v_per_fs / _FORMATS[sample_format]
        self._count = 0
        self._overflows = 0
        self._skipped = 0
        self._starved = 0
        self._cursor = 0
        self.last_block_start = 0
        self._stream = None
        self._started = False
        self._stopping = False
        self._lost = False
        # compile (or load) the ring reader now, not on the first frame after the stream
        # starts: a device keeps delivering while a kernel compiles
        _ring_read(self._ring, 0, 1, self.sample_rate_hz,
                   -1 if self.channel == "mix" else self.channel, self._scale,
                   np.zeros(1), np.zeros(1))
        self.name = f"device:{self.device_name}"

    # ------------------------------------------------------------ PortAudio thread
    def _callback(self, indata, frames, time_info, status):
        """Copy one block into the ring; nothing else happens in PortAudio's thread."""
        if status.input_overflow:
            self._overflows += 1
        ring = self._ring
        cap = self.capacity
        c = self._count
        if frames > cap:  # a block longer than the ring: only its newest rows can be kept
            c += frames - cap
            indata = indata[frames - cap:]
            frames = cap
        pos = c % cap
        first = cap - pos if frames > cap - pos else frames
        ring[pos:pos + first] = indata[:first]
        if first < frames:
            ring[:frames - first] = indata[first:frames]
        self._count = c + frames  # published after the copy: readers never see unwritten rows

    def _finished(self):
        if not self._stopping:
            self._lost = True

    # ------------------------------------------------------------ control
    def start(self) -> LiveInput:
        """Open the device and start capturing (time 0 = first sample)."""
        if self._started:
            return self
        sd = _portaudio()
        try:
            self._stream = sd.InputStream(device=self.index, samplerate=self.sample_rate_hz,
                                          channels=self.channels, dtype=self.sample_format,
                                          blocksize=self.blocksize, callback=self._callback,
                                          finished_callback=self._finished)
            self._stream.start()
        except Exception as exc:  # PortAudioError: busy, vanished, refused
            self._stream = None
            raise DeviceError(f"cannot start audio input {self.index} "
                              f"({self.device_name}): {exc}") from None
        self._started = True
        return self

    def stop(self) -> None:
        """Stop capturing and release the device; values already captured stay readable."""
        self._stopping = True
        if self._stream is not None:
            try:
                self._stream.stop()
                self._stream.close()
            except Exception:  # noqa: BLE001 - a lost device may fail to close; it is gone
                pass
            self._stream = None

    close = stop

    def __enter__(self) -> LiveInput:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    def __del__(self):
        if getattr(self, "_stream", None) is not None:
            self.stop()

    # ------------------------------------------------------------ reading
    @property
    def samples_received(self) -> int:
        """Sample frames captured since :meth:`start`."""
        return self._count

    @property
    def status(self) -> LiveStatus:
        """Current :class:`LiveStatus`."""
        if not self._started:
            state = "idle"
        elif self._lost or (not self._stopping and self._stream is not None
                            and not self._stream.active):
            state = "lost"
        elif self._stopping:
            state = "stopped"
        else:
            state = "running"
        return LiveStatus(state, self._count, self._overflows, self._skipped, self._starved)

    def available_until_s(self) -> float:
        """Time, s, just after the newest sample received (``samples_received / rate``)."""
        return self._count / self.sample_rate_hz

    def _held(self, hi: int) -> int:
        """Oldest absolute sample index the reader may use when *hi* samples were written."""
        return max(0, hi - self.capacity + self._guard)

    def values_at(self, t_s) -> np.ndarray:
        """Control volts at times *t_s* (s from the first sample), linear interpolation.

        Times after the newest sample hold the newest value; before the oldest kept sample,
        the oldest.  All zeros before the first sample arrives.
        """
        t = as_times(t_s)
        out = np.zeros(t.size, dtype=np.float64)
        ch = -1 if self.channel == "mix" else self.channel
        for _ in range(3):  # retry if the writer overran the rows while they were read
            hi = self._count
            if hi == 0:
                return out.reshape(t.shape)
            lo = self._held(hi)
            _ring_read(self._ring, lo, hi, self.sample_rate_hz, ch, self._scale,
                       t.ravel(), out)
            if self._count - self.capacity <= lo:
                break
        return out.reshape(t.shape)

    def read_block(self, n: int, *, timeout_s: float = 1.0) -> np.ndarray:
        """The next *n* samples (control volts) after the previous block.

        Waits up to *timeout_s* (wall clock, only as a time-out) for samples that have not
        arrived; any still missing then hold the last value and count as ``starved``.  If the
        ring has already overwritten the next samples, the read jumps to the oldest one
        kept and counts the jump as ``skipped``.  ``last_block_start`` gives the absolute
        sample index of the block's first sample (its time is that / ``sample_rate_hz``).

        Returns
        -------
        ndarray of float64, shape (n,)
        """
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 0:
            raise ConfigError("block length must be a whole number ≥ 0", key="n", value=n)
        n = int(n)
        if n > self.capacity - self._guard:
            raise ConfigError(f"block longer than the ring keeps "
                              f"({self.capacity - self._guard} samples)", key="n", value=n)
        deadline = time.monotonic() + max(float(timeout_s), 0.0)
        while self._count < self._cursor + n and self.status.state == "running" \
                and time.monotonic() < deadline:
            time.sleep(0.0005)
        out = np.empty(n, dtype=np.float64)
        ch = -1 if self.channel == "mix" else self.channel
        while True:
            hi = self._count
            lo = self._held(hi)
            if self._cursor < lo:
                self._skipped += lo - self._cursor
                self._cursor = lo
            start = self._cursor
            got = min(max(hi - start, 0), n)
            _ring_copy(self._ring, start, got, ch, self._scale, out)
            # the writer may have lapped the rows while they were copied: jump and copy again
            if self._count - self.capacity <= start or time.monotonic() > deadline + 1.0:
                break
        if got < n:
            self._starved += n - got
            out[got:] = out[got - 1] if got else self.values_at(max(hi - 1, 0) /
                                                               self.sample_rate_hz)
        self._cursor = start + n
        self.last_block_start = start
        return out
