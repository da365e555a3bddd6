"""``pattern:NAME[:OPTIONS]`` picture sources: test signals wherever a clip is accepted.

Syntax: ``pattern:NAME`` or ``pattern:NAME:KEY=VALUE,KEY=VALUE…`` with NAME one of
:data:`livecurve.signal.patterns.NAMES` and keys

``format``    video format (default ``1080p30``); the picture is its active size and rate
``standard``  matrix for colour bars (default BT.709 for HD, BT.601 for SD)
``amp``       colour-bar amplitude, 75 or 100 (percent; default 75)
``steps``     staircase steps, 5 or 10 (default 10)
``level``     flat-field level, percent of Y′ (default 50)
``had``       pulse half-amplitude duration in T, 1 or 2 (default 2)
``to``        sweep end frequency (default the format's nominal bandwidth), e.g. ``20MHz``
``frames``    how many identical frames (default 1)

A one-frame pattern is a ``still`` (so ``render`` may write it as a 16-bit PNG); more frames
make a ``sequence`` with the format's frame rate.  Frames are 16-bit full-range R′G′B′ codes,
as a 16-bit still would decode.
"""

from __future__ import annotations

from livecurve.errors import ConfigError, MediaError
from livecurve.media.probe import MediaInfo
from livecurve.media.source import FrameSource
from livecurve.signal import patterns
from livecurve.signal.timing import get_format
from livecurve.units import parse_value

PREFIX = "pattern:"
_KEYS = ("format", "standard", "amp", "steps", "level", "had", "frames", "to")


def is_pattern(spec) -> bool:
    """True when *spec* names a generated test signal."""
    return isinstance(spec, str) and spec.startswith(PREFIX)


def parse_pattern(spec: str) -> tuple[str, dict, dict]:
    """Split ``pattern:NAME[:OPTIONS]`` into (name, signal options, source options).

    Raises
    ------
    MediaError
        Unknown name or key, or a value that cannot be read; the message names the spec.
    """
    body = spec[len(PREFIX):]
    name, _sep, rest = body.partition(":")
    name = name.strip().lower()
    if name not in patterns.NAMES:
        raise MediaError(f"{spec!r}: unknown test signal '{name}'; known: "
                         f"{', '.join(patterns.NAMES)}")
    sig: dict = {}
    src = {"format": "1080p30", "standard": None, "frames": 1}
    for item in filter(None, (s.strip() for s in rest.split(","))):
        key, eq, val = item.partition("=")
        key = key.strip().lower()
        if not eq or key not in _KEYS:
            raise MediaError(f"{spec!r}: option '{item}' is not KEY=VALUE with KEY one of "
                             f"{', '.join(_KEYS)}")
        val = val.strip()
        try:
            if key in ("format", "standard"):
                src[key] = val
            elif key == "frames":
                src[key] = int(val)
                if src[key] < 1:
                    raise ValueError(val)
            elif key == "to":
                sig["to_hz"] = parse_value(val, "Hz", key=f"{spec} to")
            elif key == "steps":
                sig["steps"] = int(val)
            elif key == "had":
                sig["had_t"] = float(val)
            else:
                sig[key] = float(val.rstrip("%"))
        except (ValueError, ConfigError) as exc:
            raise MediaError(f"{spec!r}: option {key}={val!r} cannot be read ({exc})") from None
    return name, sig, src


class PatternSource(FrameSource):
    """Frames of one generated test signal (see module docstring)."""

    def __init__(self, spec: str, *, start_s: float = 0.0, duration_s: float | None = None,
                 loop: bool = False):
        name, sig, src = parse_pattern(spec)
        try:
            fmt = get_format(src["format"])
            standard = src["standard"] or ("bt709" if fmt.active_h >= 720 else "bt601")
            planes = patterns.frame(name, fmt, standard=standard, **sig)
            self._rgb = patterns.to_rgb_codes(planes, standard=standard, bits=16)
        except ConfigError as exc:
            raise MediaError(f"{spec!r}: {exc}") from None
        n = int(src["frames"])
        info = MediaInfo(path=spec, kind="still" if n == 1 else "sequence",
                         width=fmt.active_w, height=fmt.active_h, fps=fmt.frame_rate,
                         n_frames=n, n_frames_exact=True, duration_s=n / fmt.frame_rate,
                         has_audio=False, audio_rate=None, colour_matrix=standard,
                         source_bits=16)
        self.format = fmt
        self._cursor = 0
        super().__init__(info, start_s=start_s, duration_s=duration_s, loop=loop)

    def _open_at(self, index: int) -> None:
        self._cursor = index

    def _read(self):
        if self._cursor >= (self.info.n_frames or 0):
            return None
        self._cursor += 1
        return self._rgb.copy()
