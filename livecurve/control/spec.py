"""The ``--control`` grammar: one text line → a control source.

The grammar is livecurve's own.  Parts are separated by ``:``; after the fixed parts come
optional ``key=value`` options; several sources joined by ``+`` are summed::

    const:1.2V                         a fixed voltage
    lfo:sine:2Hz:0.5V                  oscillator: shape, rate, amplitude
    lfo:steps:4Hz:0.2V:offset=0.1V:phase=90deg:seed=7
    file:beat.wav                      an audio file (any format ffmpeg reads)
    file:beat.wav:channel=1:gain=2V    one channel, 2 V per full scale
    clip                               the soundtrack of the clip being processed
    device:3   device:USB Mic          live input by index or by part of its name
    device:USB Mic:rate=44100Hz:channel=1
    lfo:sine:2Hz:0.5V+const:1.2V       sum

Numbers take SI prefixes (p n u µ m k M G) and an optional unit (V, Hz, deg); a bare
number is read in the unit the field expects.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

from livecurve.control.sources import LFO_SHAPES, AudioFile, Constant, ControlSource, Lfo, Sum
from livecurve.errors import ConfigError, UnitError

#: Shown in every error about a malformed ``--control`` text.
ACCEPTED_FORMS = (
    "const:VOLTS | lfo:SHAPE:RATE:AMPLITUDE[:offset=V][:phase=deg][:seed=N] "
    f"(SHAPE one of {', '.join(LFO_SHAPES)}) | file:PATH[:channel=mix|N][:gain=V] | "
    "clip[:channel=mix|N][:gain=V] | device:INDEX|NAME[:channel=mix|N][:gain=V][:rate=Hz]"
    "[:channels=N][:seconds=S] | A+B (sum)"
)

#: SI prefixes as powers of ten (applied in decimal, so "350mV" is exactly float("0.35")).
_PREFIX = {"p": -12, "n": -9, "u": -6, "µ": -6, "m": -3, "": 0, "k": 3, "M": 6, "G": 9}
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")
_SPLIT_SUM = re.compile(r"\s*\+\s*(?=(?:const|lfo|file|device):|clip(?::|\s*$|\s*\+))")
_OPTION = re.compile(r"^(channel|gain|offset|phase|seed|rate|channels|seconds)=(.*)$")


def parse_amount(text: str, unit: str, *, key: str = "value") -> float:
    """Read ``"500mV"``, ``"2Hz"``, ``"1.5k"`` or ``"0.25"`` as a float in *unit*.

    Parameters
    ----------
    text : str
        A number, optionally followed by an SI prefix and the unit symbol.
    unit : str
        The unit the field expects (``"V"``, ``"Hz"``, ``"deg"``, ``"s"``).
    key : str, optional
        Where the text came from, for the error message.

    Raises
    ------
    UnitError
        The text is not a finite number with an accepted prefix and this unit.
    """
    m = _NUMBER.match(str(text))
    if m:
        number, tail = m.groups()
        if tail.endswith(unit):
            tail = tail[: -len(unit)]
        if tail in _PREFIX:
            try:
                v = float(Decimal(number).scaleb(_PREFIX[tail]))
            except ArithmeticError:  # an exponent beyond decimal's range: not finite
                v = math.inf
            if math.isfinite(v):
                return v
    raise UnitError(f"expected a number in {unit} (SI prefixes p n u m k M G allowed), "
                    f"e.g. '0.5{unit}'", key=key, value=text)


def _split_options(fields: list[str], what: str, allowed: tuple[str, ...], spec: str):
    """Strip trailing ``key=value`` fields; return (positional fields, options)."""
    opts: dict[str, str] = {}
    while fields:
        m = _OPTION.match(fields[-1].strip())
        if not m:
            break
        k, v = m.groups()
        if k not in allowed:
            raise ConfigError(f"option '{k}' does not apply to {what}; it accepts "
                              f"{', '.join(allowed) or 'no options'}. Accepted forms: "
                              f"{ACCEPTED_FORMS}", key="--control", value=spec)
        opts[k] = v.strip()
        fields.pop()
    return fields, opts


def _channel(text: str, spec: str):
    if text == "mix":
        return "mix"
    if text.isdigit():
        return int(text)
    raise ConfigError("channel must be 'mix' or a channel index (0, 1, …)",
                      key="--control channel", value=text)


def _int(text: str, key: str) -> int:
    if not text.isdigit():
        raise ConfigError("expected a whole number ≥ 0", key=key, value=text)
    return int(text)


def _parse_one(part: str, spec: str, clip_path, *, dry: bool = False) -> ControlSource | None:
    """One part of a source text.  With *dry*, files are only probed for an audio stream
    and devices are not opened; those parts give None."""
    kind, _, rest = part.partition(":")
    kind = kind.strip().lower()
    fields = rest.split(":") if rest else []
    if kind == "const":
        fields, _ = _split_options(fields, "const", (), spec)
        if len(fields) == 1:
            return Constant(parse_amount(fields[0], "V", key="const"))
    elif kind == "lfo":
        fields, o = _split_options(fields, "lfo", ("offset", "phase", "seed"), spec)
        if len(fields) == 3:
            shape = fields[0].strip().lower()
            if shape not in LFO_SHAPES:
                raise ConfigError(f"unknown oscillator shape; accepted: {', '.join(LFO_SHAPES)}",
                                  key="--control", value=spec)
            return Lfo(shape, parse_amount(fields[1], "Hz", key="lfo rate"),
                       parse_amount(fields[2], "V", key="lfo amplitude"),
                       offset_v=parse_amount(o.get("offset", "0"), "V", key="lfo offset"),
                       phase_deg=parse_amount(o.get("phase", "0"), "deg", key="lfo phase"),
                       seed=_int(o.get("seed", "0"), "lfo seed"))
    elif kind in ("file", "clip"):
        fields, o = _split_options(fields, kind, ("channel", "gain"), spec)
        kw = {"channel": _channel(o.get("channel", "mix"), spec),
              "gain_v_per_fs": parse_amount(o.get("gain", "1"), "V", key=f"{kind} gain")}
        if kind == "file" and fields and ":".join(fields).strip():
            if dry:
                from livecurve.media.probe import audio_stream
                audio_stream(":".join(fields).strip())
                return None
            return AudioFile(":".join(fields).strip(), **kw)
        if kind == "clip" and not fields:
            if dry:
                return None
            if clip_path is None:
                raise ConfigError("'clip' takes the audio of the clip being processed, "
                                  "but there is no clip (the input is a camera or a still)",
                                  key="--control", value=spec)
            return AudioFile(clip_path, **kw)
    elif kind == "device":
        fields, o = _split_options(fields, "device", ("channel", "gain", "rate", "channels",
                                                      "seconds"), spec)
        name = ":".join(fields).strip()
        if name:
            channel = _channel(o.get("channel", "mix"), spec)
            channels = _int(o.get("channels", "1"), "device channels")
            if channel != "mix":
                channels = max(channels, channel + 1)
            rate = parse_amount(o.get("rate", "48000"), "Hz", key="device rate")
            if dry:  # the options as a device would read them; the device is not opened
                parse_amount(o.get("seconds", "4"), "s", key="device seconds")
                parse_amount(o.get("gain", "1"), "V", key="device gain")
                return None
            from livecurve.control.live import LiveInput

            return LiveInput(int(name) if name.isdigit() else name, rate_hz=rate,
                             channels=channels, channel=channel,
                             seconds=parse_amount(o.get("seconds", "4"), "s",
                                                  key="device seconds"),
                             gain_v_per_fs=parse_amount(o.get("gain", "1"), "V",
                                                        key="device gain"))
    raise ConfigError(f"cannot read control source '{part}'; accepted forms: {ACCEPTED_FORMS}",
                      key="--control", value=spec)


def parse_source(spec: str, *, clip_path=None) -> ControlSource:
    """Turn a ``--control`` text into a control source.

    Parameters
    ----------
    spec : str
        Text in the grammar above, e.g. ``"lfo:sine:2Hz:0.5V+file:beat.wav"``.
    clip_path : str or os.PathLike, optional
        The clip being processed; needed by the ``clip`` form.

    Returns
    -------
    ControlSource
        A :class:`~livecurve.control.sources.Sum` when the text has several parts.
        A ``device`` part gives a :class:`~livecurve.control.live.LiveInput` that is opened
        but not started.

    Raises
    ------
    ConfigError
        Unknown form (the message lists the accepted forms), bad number or option.
    MediaError, DeviceError
        A named file or device cannot be opened.
    """
    if not isinstance(spec, str) or not spec.strip():
        raise ConfigError(f"empty control source; accepted forms: {ACCEPTED_FORMS}",
                          key="--control", value=spec)
    parts = [p.strip() for p in _SPLIT_SUM.split(spec.strip())]
    try:
        sources = [_parse_one(p, spec, clip_path) for p in parts]
    except ConfigError as exc:
        if ACCEPTED_FORMS in str(exc):
            raise
        raise type(exc)(f"{exc}; in control source {spec!r}; accepted forms: "
                        f"{ACCEPTED_FORMS}") from None
    return sources[0] if len(sources) == 1 else Sum(sources)


def check_source(spec: str) -> str:
    """Check a source text as :func:`parse_source` would read it, without decoding audio
    or opening devices (for ``livecurve check``).

    Files are probed for an audio stream; ``clip`` is accepted (whether the clip has a
    soundtrack is known only when a clip is given); ``device`` parts have their options
    checked but the device is not opened.

    Returns
    -------
    str
        *spec*, stripped.

    Raises
    ------
    ConfigError
        Malformed text (the message lists the accepted forms).
    MediaError
        A named file is missing, unreadable or has no audio stream.
    """
    if not isinstance(spec, str) or not spec.strip():
        raise ConfigError(f"empty control source; accepted forms: {ACCEPTED_FORMS}",
                          key="--control", value=spec)
    for p in _SPLIT_SUM.split(spec.strip()):
        try:
            _parse_one(p.strip(), spec, None, dry=True)
        except ConfigError as exc:
            if ACCEPTED_FORMS in str(exc):
                raise
            raise type(exc)(f"{exc}; in control source {spec!r}; accepted forms: "
                            f"{ACCEPTED_FORMS}") from None
    return spec.strip()


def silent_clip(clip_path, *, control: str = "", stream=None) -> bool:
    """Whether a control block whose default source is the clip's soundtrack must do
    without it.

    True for no clip (a still, a camera) and for a clip without an audio stream; for the
    latter a warning goes to stderr saying the knob holds its value.

    Parameters
    ----------
    clip_path : str or None
        The clip being processed.
    control : str, keyword-only
        Name of the control block (for the warning).
    """
    if clip_path is None:
        return True
    from livecurve.errors import MediaError
    from livecurve.media.probe import audio_stream
    try:
        audio_stream(clip_path)
    except MediaError as exc:
        import sys
        out = stream if stream is not None else sys.stderr
        print(f"livecurve: warning: control '{control}' defaults to the clip's soundtrack, "
              f"but {exc}; the knob it drives holds its value", file=out)
        return True
    return False
