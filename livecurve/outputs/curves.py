"""DC transfer curves of a chain to CSV and PNG, and SPICE decks to disk.

Both come straight from the DC solver (``ChainModel.transfer``), the same source of
truth the tables and the exported deck use.
"""

from __future__ import annotations

import io

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.circuit.spice import chain_deck
from livecurve.config.chainfile import ChainSpec
from livecurve.errors import ConfigError
from livecurve.media.atomic import atomic_output
from livecurve.signal.component import channel_names

CSV_HEADER = "input_v,out0_v,out1_v,out2_v"
#: Sweep points accepted: two ends at least, and a file size people still open.
POINTS_MIN, POINTS_MAX = 2, 100_000


def check_points(points, *, key: str = "--points") -> int:
    """A sweep point count, checked to be a whole number 2…100 000."""
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) \
            or not POINTS_MIN <= points <= POINTS_MAX:
        raise ConfigError(f"sweep points must be a whole number {POINTS_MIN}…{POINTS_MAX}",
                          key=key, value=points)
    return int(points)


def sweep_points(spec: ChainSpec, points: int) -> np.ndarray:
    """The uniform sweep over the chain's range, volts (same points as the deck's ``.dc``)."""
    points = check_points(points)
    lo, hi = spec.sweep_v
    return np.linspace(lo, hi, points)


def curves(spec: ChainSpec, *, points: int = 501, t_kelvin: float | None = None,
           live: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(input volts (N,), outputs (3, N)) of every channel."""
    vin = sweep_points(spec, points)
    return vin, ChainModel(spec).transfer_all(vin, t_kelvin=t_kelvin, live=live)


def write_curve_csv(path, vin: np.ndarray, vout: np.ndarray, *, force: bool = True) -> None:
    """CSV with header ``input_v,out0_v,out1_v,out2_v``, one row per sweep point."""
    buf = io.StringIO()
    buf.write(CSV_HEADER + "\n")
    np.savetxt(buf, np.column_stack([vin, vout.T]), fmt="%.9g", delimiter=",")
    with atomic_output(path, force=force) as tmp:
        tmp.write_text(buf.getvalue())


def curve_figure(vin, vout, spec: ChainSpec, *, t_kelvin: float | None = None,
                 live: dict | None = None, title: str = ""):
    """The three channel curves, output volts against input volts (a matplotlib Figure).

    The title records the chain, the junction temperature and the knob settings; the
    three lines carry exactly *vin* and *vout* (the CSV's numbers).
    """
    from livecurve.outputs.plots import chain_title, new_figure, plot_channels
    fig, ax = new_figure(960, 600)
    plot_channels(ax, np.asarray(vin), np.asarray(vout), channel_names(spec.space))
    ax.set_xlabel("input [V] (centred: 0 V is mid-scale)")
    ax.set_ylabel("output [V]")
    ax.set_title(title or chain_title(spec, "DC transfer", t_kelvin=t_kelvin, live=live),
                 fontsize="medium")
    return fig


def write_curve_png(path, vin, vout, spec: ChainSpec, *, title: str = "",
                    t_kelvin: float | None = None, live: dict | None = None,
                    force: bool = True) -> None:
    """Plot of the three channel curves as PNG, SVG or PDF (by *path*'s extension).

    Pass the *t_kelvin* and *live* the curves were computed with, so the title says so.
    """
    from livecurve.outputs.plots import save_figure
    save_figure(path, curve_figure(vin, vout, spec, t_kelvin=t_kelvin, live=live,
                                   title=title), force=force)


def write_spice(path, spec: ChainSpec, *, t_kelvin: float | None = None,
                live: dict | None = None, points: int = 501, force: bool = True,
                data_file: str | None = None) -> str:
    """Write the chain's self-contained ngspice deck; returns its text."""
    points = check_points(points)
    text = chain_deck(ChainModel(spec), t_kelvin=t_kelvin, live=live, points=points,
                      data_file=data_file)
    with atomic_output(path, force=force) as tmp:
        tmp.write_text(text)
    return text
