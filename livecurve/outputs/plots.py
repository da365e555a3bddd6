"""Report figures drawn with matplotlib: the shared look and the file writer.

The report verbs (``curve``, ``curve --step``, ``drift``, ``spread``) build
:class:`matplotlib.figure.Figure` objects directly (no ``pyplot``, no window, no global
backend switch: a figure made this way renders with the Agg rasteriser or the vector
writers), and :func:`save_figure` writes one as PNG, SVG or PDF chosen by the output's
extension, all-or-nothing.  The live window's monitors are drawn with OpenCV elsewhere
(``livecurve.monitors``); nothing here runs in the real-time path.

Conventions
-----------
* Every axis label carries its unit in brackets, e.g. ``input [V]``.
* The three channels differ by colour *and* line style (solid, dashed, dash-dot), so two
  channels with the same curve stay distinguishable and a grey-scale print still reads;
  every figure with more than one series has a legend.
* The title records the chain's title, the junction temperature and every knob setting
  (:func:`settings_text`).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from livecurve.errors import OutputError

#: Output formats by file extension.
FIGURE_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}
#: Raster resolution of PNG figures, dots per inch.
DPI = 100
#: Channel colours (our own choice: amber, teal, violet) and line styles.
CHANNEL_COLOURS = ("#d9822b", "#1f8a8a", "#7a4fc2")
CHANNEL_STYLES = ("-", "--", "-.")
#: Extra series (bands, references).
NEUTRAL = "#5a5a5a"


def figure_format(path) -> str:
    """The figure format named by *path*'s extension (``png``, ``svg`` or ``pdf``).

    Raises
    ------
    OutputError
        Any other extension.
    """
    ext = Path(os.fspath(path)).suffix.lower()
    if ext not in FIGURE_FORMATS:
        raise OutputError(f"{path}: a figure must end in one of "
                          f"{', '.join(FIGURE_FORMATS)} (the extension picks the format)")
    return FIGURE_FORMATS[ext]


def new_figure(width_px: int = 960, height_px: int = 600, **subplots) -> tuple[Figure, object]:
    """A figure of *width_px* × *height_px* pixels (at :data:`DPI`) and its axes.

    Extra keyword arguments go to :meth:`Figure.subplots` (``nrows``, ``ncols``,
    ``gridspec_kw`` …).
    """
    fig = Figure(figsize=(width_px / DPI, height_px / DPI), dpi=DPI, layout="constrained")
    axes = fig.subplots(**subplots)
    return fig, axes


def channel_style(ch: int) -> dict:
    """Colour, line style and width of channel *ch* (0, 1, 2)."""
    return {"color": CHANNEL_COLOURS[ch % 3], "linestyle": CHANNEL_STYLES[ch % 3],
            "linewidth": 1.6}


def channel_label(ch: int, names) -> str:
    return f"channel {ch} ({names[ch]})"


def plot_channels(ax, x: np.ndarray, ys, names, *, marker: str | None = None) -> list:
    """Draw the three channel series *ys* (3, N) against *x* on *ax*, with a legend.

    Returns the three :class:`~matplotlib.lines.Line2D` (their data is exactly *x*, *ys*).
    """
    lines = []
    for ch in range(len(ys)):
        (ln,) = ax.plot(x, ys[ch], label=channel_label(ch, names), marker=marker,
                        markersize=3, **channel_style(ch))
        lines.append(ln)
    ax.legend(loc="best", fontsize="small")
    ax.grid(True, alpha=0.35)
    return lines


def _temp_text(spec, t_kelvin: float | None) -> str:
    if t_kelvin is None:
        return f"{spec.ambient_k - 273.15:.1f} °C (ambient)"
    return f"{t_kelvin - 273.15:.1f} °C"


def knob_text(spec, live: dict | None = None) -> str:
    """Every knob at its setting (*live* or its starting value), in its unit."""
    from livecurve.analysis.summary import value_text
    parts = []
    for name, ls in spec.live.items():
        v = (live or {}).get(name, ls.value)
        parts.append(f"{name} = {value_text(v, ls.unit)}")
    return ", ".join(parts)


def settings_text(spec, *, t_kelvin: float | None = None, live: dict | None = None) -> str:
    """``temperature; knob = value, …`` for titles."""
    knobs = knob_text(spec, live)
    return f"junctions at {_temp_text(spec, t_kelvin)}" + (f"; {knobs}" if knobs else "")


def chain_title(spec, what: str, *, t_kelvin: float | None = None,
                live: dict | None = None) -> str:
    """Two-line figure title: chain and what is shown, then temperature and knobs."""
    return f"{spec.title}: {what}\n{settings_text(spec, t_kelvin=t_kelvin, live=live)}"


def save_figure(path, fig: Figure, *, force: bool = True) -> Path:
    """Write *fig* as PNG, SVG or PDF (by the extension of *path*), all-or-nothing.

    Raises
    ------
    OutputError
        Unknown extension, target exists without *force*, folder missing, disk full.
    """
    from livecurve.media.atomic import atomic_output
    fmt = figure_format(path)
    p = Path(os.fspath(path))
    meta = {"png": {"Software": "livecurve"}, "svg": {"Date": None},
            "pdf": {"CreationDate": None}}[fmt]
    with atomic_output(p, force=force) as tmp, open(tmp, "wb") as fh:
        fig.savefig(fh, format=fmt, dpi=DPI, metadata=meta)
    return p


def write_png(path, img: np.ndarray, *, force: bool = True) -> None:
    """Write a BGR uint8 picture (not a figure: e.g. a strip of processed frames) as PNG,
    all-or-nothing."""
    import cv2

    from livecurve.media.atomic import atomic_output
    ok, data = cv2.imencode(".png", img)
    if not ok:
        raise OutputError(f"{path}: the PNG encoder refused the picture")
    with atomic_output(path, force=force) as tmp, open(tmp, "wb") as fh:
        fh.write(data.tobytes())
