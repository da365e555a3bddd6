"""Step responses of each channel through the whole chain (tables and line filters), as
the engine computes them along a scan line: ``livecurve curve --step``."""

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
    when the chain leaves it to the clip).  Returns (time_s (N,), out (3, N)); time 0 is
    the step.
    """
    check_space(spec.space)
    f = get_format(fmt or (spec.format if spec.format != "auto" else "1080p30"))
    eng = FrameEngine(spec, pixel_period_s=f.pixel_period_s)
    line = np.full((3, 1, samples), from_v, dtype=np.float32)
    line[:, :, lead:] = to_v
    out = eng.process(line)
    t = (np.arange(samples) - lead) * f.pixel_period_s
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
