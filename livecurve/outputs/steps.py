"""Step responses of each channel through the whole chain (tables and line filters), as
the engine computes them along a scan line: ``livecurve curve --step``.

Time convention (the CSV's ``time_ns`` column): the input is one value per pixel, held
for the whole pixel period T (a zero-order hold, as video arrives).  The step is at
t = 0: pixels before it hold ``from_v``, the pixel starting at t = 0 and all later ones
hold ``to_v``.  Each output sample is the stage's continuous output at the *end* of its
pixel (:mod:`livecurve.engine.dynamics`), so output row n of the line is written at
t = (n − lead + 1)·T: the first row at t > 0 is t = T, one pixel period after the step, and
the row at t = 0 is the settled level just before it.  Read this way the CSV is a
sampling of the continuous response to an ideal step at t = 0 (what an ngspice ``.tran``
of the same circuit with a step at t = 0 gives at those instants).
"""

from __future__ import annotations

import io

import numpy as np

from livecurve.config.chainfile import ChainSpec
from livecurve.engine.pipeline import FrameEngine
from livecurve.media.atomic import atomic_output
from livecurve.signal.component import channel_names, check_space
from livecurve.signal.timing import get_format

STEP_HEADER = "time_ns,out0_v,out1_v,out2_v"


def step_responses(spec: ChainSpec, *, samples: int = 400, lead: int = 40,
                   from_v: float = -0.35, to_v: float = 0.35, fmt: str | None = None):
    """Each channel's response to a step from *from_v* to *to_v* (centred volts) on one line.

    The line is sampled at the pixel clock of *fmt* (default: the chain's format, or 1080p30
    when the chain leaves it to the clip).  Returns (time_s (N,), out (3, N)): the step is
    at time 0 and each output is taken at the end of its pixel (module docstring), so
    time_s[n] = (n − lead + 1)·T.
    """
    check_space(spec.space)
    f = get_format(fmt or (spec.format if spec.format != "auto" else "1080p30"))
    eng = FrameEngine(spec, pixel_period_s=f.pixel_period_s)
    line = np.full((3, 1, samples), from_v, dtype=np.float32)
    line[:, :, lead:] = to_v
    out = eng.process(line)
    t = (np.arange(samples) - lead + 1) * f.pixel_period_s
    return t, out[:, 0, :].astype(np.float64)


def write_steps(spec: ChainSpec, *, csv=None, png=None, force: bool = True) -> None:
    """Write the step responses as CSV (``time_ns,out0_v,out1_v,out2_v``) and/or PNG."""
    t, y = step_responses(spec)
    if csv:
        buf = io.StringIO()
        buf.write(STEP_HEADER + "\n")
        np.savetxt(buf, np.column_stack([t * 1e9, y.T]), fmt="%.9g", delimiter=",")
        with atomic_output(csv, force=force) as tmp:
            tmp.write_text(buf.getvalue())
        print(f"wrote {csv}")
    if png:
        from livecurve.outputs.plots import line_plot, write_png
        names = channel_names(spec.space)
        img = line_plot(t * 1e9, list(y), labels=[f"{i}: {n}" for i, n in enumerate(names)],
                        title=f"{spec.title}: step response along a line",
                        xlabel="time (ns)", ylabel="output (V)")
        write_png(png, img, force=force)
        print(f"wrote {png}")
