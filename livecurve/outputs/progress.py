"""Progress of long runs (render frames, spread trials) on stderr.

* On a terminal: a tqdm bar (count, rate, time left).
* Not a terminal (a log file, CI, a pipe): no bar and no carriage returns, a few plain
  lines instead: when the run starts, at each quarter of the total (every 30 s when the
  total is unknown), and at the end.
* The first item of a run includes the one-time work before steady state: numba
  compiling its kernels on first use (later runs load them from the cache).  Until it
  is done the bar shows a *starting* phase instead of a rate, and rates and time left
  are measured from the end of the first item, so the first frame's start-up never
  shows as "0.0 fps, 5508 s left".

API (what the loops call)::

    bar = Progress(total, enabled=True, desc="render", unit="frame")
    bar.update(done)               # items done so far (absolute count)
    bar.update(done, force=True)   # the same, now (not rate-limited)
    bar.close()
"""

from __future__ import annotations

import sys
import time

#: Text of the phase before the first item is done.
STARTING = "starting: compiling kernels on first use"
#: Seconds between plain lines when the total is unknown.
PLAIN_EVERY_S = 30.0


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


def _columns(stream) -> int:
    import os
    try:
        return os.get_terminal_size(stream.fileno()).columns
    except (AttributeError, ValueError, OSError):
        return 0


class Progress:
    """A progress display for *total* items (None when unknown).

    Parameters
    ----------
    total : int or None
        Items expected.
    enabled : bool, keyword-only
        False: print nothing at all.
    desc : str, keyword-only
        What runs (``"render"``, ``"spread"``), first word of every line.
    unit : str, keyword-only
        The item (``"frame"``, ``"trial"``).
    stream : file, keyword-only
        Default ``sys.stderr``.
    terminal : bool, keyword-only
        Force the bar (True) or the plain lines (False); default: whether *stream* is a
        terminal.
    """

    def __init__(self, total: int | None, *, enabled: bool = True, desc: str = "render",
                 unit: str = "frame", stream=None, terminal: bool | None = None):
        self.total = int(total) if total else None
        self.enabled = bool(enabled)
        self.desc, self.unit = desc, unit
        self.stream = stream if stream is not None else sys.stderr
        self.terminal = _is_terminal(self.stream) if terminal is None else bool(terminal)
        self.t0 = time.perf_counter()
        self.t_first: float | None = None
        self.done = 0
        self._bar = None
        self._next_quarter = 1
        self._last_plain = self.t0
        self._closed = False
        if not self.enabled:
            return
        if self.terminal:
            self.stream.write(f"{self.desc}: {STARTING} …")
            self.stream.flush()
        else:
            self._line(f"{self.desc}: {STARTING}"
                       + (f" ({self.total} {self.unit}s to do)" if self.total else ""))

    # -------------------------------------------------------------------- figures
    def rate(self) -> float | None:
        """Items per second since the first item was done (None before two items)."""
        if self.t_first is None or self.done < 2:
            return None
        el = time.perf_counter() - self.t_first
        return (self.done - 1) / el if el > 0 else None

    def seconds_left(self) -> float | None:
        r = self.rate()
        if r is None or not self.total:
            return None
        return max(self.total - self.done, 0) / r

    def status(self) -> str:
        """One plain line: count, rate, time left (or the starting phase)."""
        count = f"{self.done}/{self.total}" if self.total else f"{self.done}"
        text = f"{self.desc}: {count} {self.unit}s"
        if self.done == 0:
            return f"{text}; {STARTING}"
        startup = (self.t_first or self.t0) - self.t0
        text += f" (first {self.unit} {startup:.1f} s incl. start-up)"
        r = self.rate()
        if r is not None:
            text += f", {r:.1f} {self.unit}s/s"
            left = self.seconds_left()
            if left is not None and self.done < (self.total or 0):
                text += f", about {left:.0f} s left"
        return text

    # -------------------------------------------------------------------- output
    def _line(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()

    def _start_bar(self) -> None:
        from tqdm import tqdm
        self.stream.write("\r\x1b[2K")  # clear the starting line
        sized = _columns(self.stream) > 0  # a pseudo-terminal may report 0 columns
        self._bar = tqdm(total=self.total, initial=self.done, desc=self.desc, unit=self.unit,
                         file=self.stream, dynamic_ncols=sized, ncols=None if sized else 80,
                         nrows=None if sized else 24,
                         mininterval=0.25, leave=True)

    def update(self, done: int, *, force: bool = False) -> None:
        """*done* items are finished (an absolute count)."""
        now = time.perf_counter()
        if done > 0 and self.t_first is None:
            self.t_first = now
            self._last_plain = now  # periodic lines count from the end of the start-up
        self.done = int(done)
        if not self.enabled or self._closed:
            return
        if self.terminal:
            if self._bar is None:
                if done <= 0:
                    return
                self._start_bar()
                return
            step = self.done - self._bar.n
            if step:
                self._bar.update(step)
            elif force:
                self._bar.refresh()
            return
        if self.total:
            while self._next_quarter < 4 and self.done >= self._next_quarter * self.total / 4:
                self._next_quarter += 1
                if self.done < self.total:
                    self._line(self.status())
                    self._last_plain = now
        elif now - self._last_plain >= PLAIN_EVERY_S:
            self._line(self.status())
            self._last_plain = now

    def close(self) -> None:
        """Finish the display (the final count on its own line)."""
        if not self.enabled or self._closed:
            return
        self._closed = True
        if self.terminal:
            if self._bar is None:
                self.stream.write("\n")
                self.stream.flush()
            else:
                self._bar.close()
            return
        elapsed = time.perf_counter() - self.t0
        self._line(f"{self.status()}; done in {elapsed:.1f} s")
