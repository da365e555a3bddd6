"""One root exception for livecurve and its subclasses.

Every message a user sees names *where* (file, key path or device), *what*
(the offending value) and, when there is a fixed set, *what would be
accepted*.  The command line catches :class:`LivecurveError`, prints its
message and exits non-zero; it never shows a traceback for bad input.
"""

from __future__ import annotations


class LivecurveError(Exception):
    """Root of every error livecurve raises on purpose."""

    exit_code = 2


class ConfigError(LivecurveError):
    """A chain file is malformed, has an unknown or missing key, or an impossible value.

    Parameters
    ----------
    message : str
        What is wrong and what would be accepted.
    path : str, optional
        The file the value came from.
    key : str, optional
        Dotted key path inside the file, e.g. ``stages[2].r_in``.
    value : object, optional
        The offending value as written.
    """

    def __init__(self, message: str, *, path: str | None = None, key: str | None = None,
                 value: object = None):
        self.path, self.key, self.value = path, key, value
        self.reason = message
        where = []
        if path:
            where.append(str(path))
        if key:
            where.append(f"key '{key}'")
        if value is not None:
            where.append(f"value {value!r}")
        prefix = ": ".join([", ".join(where)]) if where else ""
        super().__init__(f"{prefix}: {message}" if prefix else message)


class UnitError(ConfigError):
    """A value with units (``"10k"``, ``"4.7uA"``) could not be read."""


class SolverError(LivecurveError):
    """The DC solver did not converge for a netlist and input value."""


class MediaError(LivecurveError):
    """A clip, still, image sequence or audio file is missing, unreadable, truncated or empty."""


class DeviceError(LivecurveError):
    """A camera, audio device or display is absent or was lost."""


class OutputError(LivecurveError):
    """An output could not be written (exists without --force, disk full, interrupted)."""
    exit_code = 3


class OutputInterrupted(OutputError):
    """A stop signal (Ctrl-C, SIGTERM, SIGHUP) arrived while an output was being written.

    The exit status is 128 + the signal number, as shells report a process a signal ended.
    """

    def __init__(self, message: str, *, signum: int = 2):
        super().__init__(message)
        self.signum = signum
        self.exit_code = 128 + signum


class Stopped(KeyboardInterrupt):
    """Raised in the main thread when SIGTERM or SIGHUP arrives (SIGINT raises a plain
    KeyboardInterrupt); carries the signal number so cleanup code treats every stop alike."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum
