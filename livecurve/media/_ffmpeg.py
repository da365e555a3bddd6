"""The seam between livecurve and the ffmpeg program (private to ``livecurve.media``).

livecurve never links against FFmpeg's libraries: every decode, probe and encode
runs the ffmpeg executable bundled with the PyPI package ``imageio-ffmpeg`` as a
child process and talks to it through pipes.  This module finds that executable,
starts it, drains its stderr on a thread (so a chatty child can never block on a
full pipe) and keeps the last lines for error messages.  It also reads two
small facts from ffmpeg itself: the bit depth of each pixel format (the
``-pix_fmts`` table) and the exact rational form of common frame rates.

Frame rates: ffmpeg prints rates rounded to two decimals (``29.97 fps``).  The
1000/1001 family (23.976, 29.97, 59.94, 119.88 Hz) is the NTSC-derived family of
SMPTE ST 274 / ST 296 and is restored exactly; any other rate is taken as printed.
"""

from __future__ import annotations

import collections
import functools
import math
import re
import subprocess
import threading
from fractions import Fraction

from livecurve.errors import MediaError

#: Lines of ffmpeg's stderr kept for error messages.
STDERR_LINES = 200

_ADDR = re.compile(r"\[[^\]]*@ 0x[0-9a-f]+\]\s*")


@functools.lru_cache(maxsize=1)
def ffmpeg_exe() -> str:
    """Path of the ffmpeg executable shipped with ``imageio-ffmpeg``.

    Raises
    ------
    MediaError
        When the package or its binary is missing.
    """
    try:
        import imageio_ffmpeg
    except ImportError as exc:  # pragma: no cover - dependency of the package
        raise MediaError("the Python package 'imageio-ffmpeg' is not installed; "
                         "install livecurve's dependencies") from exc
    try:
        return imageio_ffmpeg.get_ffmpeg_exe()
    except RuntimeError as exc:  # pragma: no cover - broken installation
        raise MediaError("the ffmpeg program bundled with imageio-ffmpeg is missing: "
                         f"{exc}") from exc


def clean_line(line: str) -> str:
    """Drop ffmpeg's ``[demuxer @ 0x55d0...]`` address prefixes from one message line."""
    return _ADDR.sub("", line).strip()


_NOISE = ("Press [q]", "frame=", "size=", "Error opening input file", "Task finished with",
          "Terminating thread with", "Error sending frames to consumers",
          "Could not open encoder before EOF", "Exiting normally", "Conversion failed")


def tail_text(lines, n: int = 6) -> str:
    """The telling lines of ffmpeg output, joined with ``" | "``.

    Address prefixes, progress lines and ffmpeg's generic follow-up messages are
    dropped and repeats removed; the first ``n - 1`` remaining lines (usually the
    cause) and the last one (usually the consequence) are kept.
    """
    keep: list[str] = []
    for x in lines:
        c = clean_line(x)
        if c and not c.startswith(_NOISE) and c not in keep:
            keep.append(c)
    if not keep:
        return "(ffmpeg printed nothing)"
    if len(keep) > n:
        keep = keep[:n - 1] + [keep[-1]]
    return " | ".join(keep)


def run(args: list[str], *, input_bytes: bytes | None = None,
        timeout_s: float | None = None) -> subprocess.CompletedProcess:
    """Run ffmpeg once to completion with *args* (binary path and ``-hide_banner`` added).

    Returns the completed process with ``stdout`` and ``stderr`` as bytes.
    """
    cmd = [ffmpeg_exe(), "-hide_banner", "-nostdin", *args]
    try:
        return subprocess.run(cmd, input=input_bytes, capture_output=True, timeout=timeout_s,
                              check=False)
    except subprocess.TimeoutExpired as exc:
        raise MediaError(f"ffmpeg did not finish within {timeout_s} s: {' '.join(args)}") from exc


class StderrTail:
    """Drain a child's stderr on a daemon thread, keeping the last lines.

    Parameters
    ----------
    stream : binary file object
        The child's stderr pipe.
    keep : int
        Number of lines kept.
    """

    def __init__(self, stream, *, keep: int = STDERR_LINES):
        self.lines: collections.deque[str] = collections.deque(maxlen=keep)
        self._stream = stream
        self._thread = threading.Thread(target=self._drain, daemon=True)
        self._thread.start()

    def _drain(self) -> None:
        try:
            for raw in iter(self._stream.readline, b""):
                self.lines.append(raw.decode("utf-8", "replace").rstrip())
        except (OSError, ValueError):
            pass

    def join(self, timeout_s: float = 5.0) -> None:
        """Wait until the child closed its stderr (call after the child exited), then close it."""
        self._thread.join(timeout_s)
        if not self._thread.is_alive():
            try:
                self._stream.close()
            except OSError:
                pass

    def text(self, n: int = 6) -> str:
        """Last *n* meaningful lines, joined (see :func:`tail_text`)."""
        return tail_text(list(self.lines), n)

    def contains(self, *needles: str) -> str | None:
        """First kept line containing any of *needles* (case-insensitive), cleaned, or None."""
        for line in self.lines:
            low = line.lower()
            if any(n.lower() in low for n in needles):
                return clean_line(line)
        return None


def stop_process(proc: subprocess.Popen | None, *, grace_s: float = 2.0) -> None:
    """Close a child's pipes and end it (terminate, then kill after *grace_s*)."""
    if proc is None:
        return
    for pipe in (proc.stdin, proc.stdout):
        if pipe is not None:
            try:
                pipe.close()
            except OSError:
                pass
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(grace_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


@functools.lru_cache(maxsize=1)
def _pix_fmt_table() -> dict[str, int]:
    """Map pixel-format name → deepest component in bits, from ``ffmpeg -pix_fmts``."""
    out = run(["-pix_fmts"]).stdout.decode("utf-8", "replace")
    table: dict[str, int] = {}
    for line in out.splitlines():
        parts = line.split()
        # FLAGS NAME NB_COMPONENTS BITS_PER_PIXEL BIT_DEPTHS, e.g. "IO... yuv420p10le 3 15 10-10-10"
        if len(parts) >= 5 and len(parts[0]) == 5 and parts[2].isdigit():
            try:
                table[parts[1]] = max(int(b) for b in parts[4].split("-"))
            except ValueError:
                continue
    return table


@functools.cache
def has_filter(name: str) -> bool:
    """True when the bundled ffmpeg was built with video filter *name* (``-filters``)."""
    out = run(["-filters"]).stdout.decode("utf-8", "replace")
    return any(len(p := line.split()) >= 2 and p[1] == name for line in out.splitlines())


_RGB_PREFIXES = ("gbr", "rgb", "bgr", "argb", "abgr", "0rgb", "0bgr", "x2rgb", "x2bgr", "gray",
                 "ya", "pal8", "monow", "monob")


def is_rgb_or_grey(name: str) -> bool:
    """True for pixel formats that store R′G′B′ or grey, where no Y′CbCr matrix applies."""
    return name.startswith(_RGB_PREFIXES)


def pix_fmt_bits(name: str) -> int:
    """Bits per component of pixel format *name* (e.g. 8 for ``yuv420p``, 10 for ``p010le``).

    Unknown names fall back to the digits in the name, then to 8.
    """
    bits = _pix_fmt_table().get(name)
    if bits is not None:
        return bits
    m = re.search(r"(\d{2})(?:le|be)?$", name)
    return int(m.group(1)) if m and 9 <= int(m.group(1)) <= 32 else 8


_NTSC_BASES = (24, 30, 48, 60, 120, 240)


def exact_rate(fps) -> Fraction:
    """Exact rational frame rate for *fps* (float, int, Fraction or ``"30000/1001"``).

    Rates within 0.006 Hz of ``n·1000/1001`` for n in 24, 30, 48, 60, 120, 240 are
    returned as that fraction (ffmpeg prints them rounded to two decimals).
    """
    if isinstance(fps, Fraction):
        return fps
    if isinstance(fps, str):
        fps = Fraction(fps.strip())
        if fps.denominator in (1, 1001):
            return fps
        fps = float(fps)
    x = float(fps)
    if not math.isfinite(x) or x <= 0:
        raise ValueError(f"frame rate must be a positive finite number, got {fps!r}")
    for base in _NTSC_BASES:
        if abs(x - base * 1000 / 1001) < 0.006:
            return Fraction(base * 1000, 1001)
    return Fraction(x).limit_denominator(1000)
