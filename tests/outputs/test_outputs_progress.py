"""Progress display: a tqdm bar on a terminal, a few plain lines elsewhere, and a start-up
phase so the first item's one-time work never shows as a rate."""

from __future__ import annotations

import io

import pytest

from livecurve.outputs import progress as prog
from livecurve.outputs.progress import STARTING, Progress


class Clock:
    """A clock the test moves by hand (seconds)."""

    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


@pytest.fixture
def clock(monkeypatch):
    c = Clock()
    monkeypatch.setattr(prog.time, "perf_counter", c)
    return c


def _run(bar, clock, total, *, first_s=100.0, each_s=0.1):
    clock.t += first_s  # compiling kernels and building tables
    bar.update(1)
    for k in range(2, total + 1):
        clock.t += each_s
        bar.update(k)


def test_rate_and_time_left_exclude_the_start_up(clock):
    bar = Progress(180, stream=io.StringIO(), terminal=False)
    clock.t += 100.0
    bar.update(1)
    assert bar.rate() is None and "first frame 100.0 s incl. start-up" in bar.status()
    for k in range(2, 11):
        clock.t += 0.1
        bar.update(k)
    # 9 frames in 0.9 s after the first: 10 frames/s, 170 left → 17 s (not 1700 s)
    assert bar.rate() == pytest.approx(10.0)
    assert bar.seconds_left() == pytest.approx(17.0)
    assert "10.0 frames/s" in bar.status() and "about 17 s left" in bar.status()


def test_plain_lines_when_not_a_terminal(clock):
    out = io.StringIO()
    bar = Progress(180, stream=out)  # StringIO is not a terminal
    assert not bar.terminal
    _run(bar, clock, 180)
    bar.close()
    text = out.getvalue()
    assert "\r" not in text and "\x1b" not in text
    lines = text.splitlines()
    # start, 1/4, 2/4, 3/4, end
    assert len(lines) == 5
    assert lines[0].startswith("render: " + STARTING) and "180 frames to do" in lines[0]
    assert lines[1].startswith("render: 45/180 frames")
    assert lines[-1].startswith("render: 180/180 frames") and "done in" in lines[-1]
    assert " 0.0 frames/s" not in text and "10.0 frames/s" in lines[1]


def test_plain_lines_unknown_total(clock):
    out = io.StringIO()
    bar = Progress(None, stream=out, desc="render", unit="frame")
    _run(bar, clock, 700, each_s=0.1)  # 70 s after the first frame: two 30 s lines
    bar.close()
    lines = out.getvalue().splitlines()
    assert len(lines) == 1 + 2 + 1
    assert lines[-1].startswith("render: 700 frames")


def test_terminal_bar_starts_with_the_start_up_phase(clock):
    out = io.StringIO()
    bar = Progress(50, stream=out, terminal=True, desc="spread", unit="trial")
    assert out.getvalue() == f"spread: {STARTING} …"
    clock.t += 30.0
    bar.update(1)
    assert bar._bar is not None and bar._bar.n == 1 and bar._bar.total == 50
    for k in range(2, 51):
        clock.t += 0.01
        bar.update(k)
    bar.close()
    text = out.getvalue()
    assert "50/50" in text and "trial" in text


def test_disabled_prints_nothing(clock):
    out = io.StringIO()
    bar = Progress(10, enabled=False, stream=out, terminal=True)
    _run(bar, clock, 10)
    bar.close()
    assert out.getvalue() == ""


def test_render_and_spread_use_it():
    from livecurve.outputs import render
    assert render.Progress is Progress
    import livecurve.analysis.spread as spread
    assert spread.Progress is Progress


SNIPPET = """
from livecurve.outputs.progress import Progress
b = Progress(20, desc="render", unit="frame")
for k in range(1, 21):
    b.update(k, force=True)
b.close()
"""


@pytest.mark.parametrize("cols", [100, 0])  # 0: a pseudo-terminal that reports no size
def test_bar_on_a_real_terminal(cols):
    import fcntl
    import os
    import pty
    import struct
    import subprocess
    import sys
    import termios

    from tests.conftest import ROOT
    master, slave = pty.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24 if cols else 0, cols, 0, 0))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    p = subprocess.Popen([sys.executable, "-c", SNIPPET], stdin=slave, stdout=slave,
                         stderr=slave, close_fds=True, env=env)
    os.close(slave)
    out = b""
    while True:
        try:
            d = os.read(master, 4096)
        except OSError:
            break
        if not d:
            break
        out += d
    assert p.wait(timeout=60) == 0
    text = out.decode("utf-8", "replace")
    assert text.startswith(f"render: {STARTING}")
    assert "20/20" in text and "frame/s" in text and "%|" in text
