"""``livecurve measure``: run the measurement, print the report, write JSON and a PNG sheet.

Numbers come from :mod:`livecurve.analysis.measure`; this module only formats them.  Outputs
follow the project's policy: an existing file is refused unless ``force`` (exit 3), and every
file is written to a temporary name and renamed when complete (:mod:`livecurve.media.atomic`).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from livecurve.analysis.measure import make_bench, measure, parse_sweep, sweep_knob
from livecurve.config.chainfile import ChainSpec
from livecurve.config.limits import load_limits

#: Keys of a channel kept out of the JSON file (long traces used for the sheet only).
_TRACE_KEYS = ("pulse",)


def run_measure(spec: ChainSpec, *, fmt: str | None = None, t_kelvin: float | None = None,
                live: dict | None = None, json_out=None, png_out=None, force: bool = False,
                sweep: str | None = None) -> dict:
    """Measure a chain and write what was asked; returns the report (with ``sweep`` if any).

    Raises
    ------
    ConfigError
        Bad limits, format, knob or sweep.
    OutputError
        An output exists without *force* or cannot be written.
    """
    from livecurve.media.atomic import check_target
    for out in (json_out, png_out):
        if out is not None:
            check_target(out, force=force)
    limits = load_limits(spec.path) if Path(spec.path).is_file() else None
    knob = parse_sweep(sweep, spec) if sweep else None
    bench = make_bench(spec, fmt=fmt, t_kelvin=t_kelvin, live=live)
    rep = measure(bench, limits=limits)
    if knob:
        rep["sweep"] = sweep_knob(bench, knob[0], knob[1], limits=limits)
    if json_out is not None:
        write_json(json_out, rep, force=force)
    if png_out is not None:
        write_sheet(png_out, rep, force=force)
    return rep


def _clean(v):
    """JSON-ready: NaN/inf → None, numpy scalars → float."""
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if isinstance(v, float):
        return float(v) if math.isfinite(v) else None
    return v


def write_json(path, rep: dict, *, force: bool = False) -> Path:
    """The report as JSON (traces left out), written atomically."""
    from livecurve.media.atomic import atomic_output
    data = dict(rep)
    data["channels"] = [{k: v for k, v in c.items() if k not in _TRACE_KEYS}
                        for c in rep["channels"]]
    text = json.dumps(_clean(data), indent=1, ensure_ascii=False)
    with atomic_output(path, force=force) as tmp:
        Path(tmp).write_text(text + "\n", encoding="utf-8")
    return Path(path)


def _fmt_hz(f) -> str:
    if f is None:
        return "above sweep"
    return f"{f / 1e6:.2f} MHz"


def report_lines(rep: dict) -> list[str]:
    """The report as text lines for stdout."""
    live = ", ".join(f"{k}={v:g}" for k, v in rep["live"].items()) or "none"
    out = [f"measure: {rep['title']} ({rep['chain']})",
           f"  format {rep['format']} ({rep['pixel_clock_hz'] / 1e6:g} MHz clock, nominal "
           f"bandwidth {rep['nominal_bandwidth_hz'] / 1e6:g} MHz), {rep['space']} "
           f"{rep['standard']}, {rep['t_kelvin'] - 273.15:.1f} °C, knobs: {live}"]
    for c in rep["channels"]:
        mb = " ".join(f"{p['gain_db']:+.2f}" for p in c["multiburst"])
        mhz = ", ".join(f"{p['freq_hz'] / 1e6:g}" for p in c["multiburst"])
        out += [
            f"channel {c['channel']} ({c['name']}):",
            f"  DC gain {c['dc_gain']:.4f}, offset {c['dc_offset_mv']:+.1f} mV; "
            f"-3 dB {_fmt_hz(c['f_3db_hz'])}; LF delay {c['delay_ns']:.2f} ns (pulse "
            f"centroid {c['pulse_delay_ns']:.2f} ns)",
            f"  multiburst dB ({mhz} MHz): {mb}",
            f"  pulse/bar {c['pulse_bar_pct']:.1f} %, overshoot {c['overshoot_pct']:.2f} %, "
            f"ringing {c['ringing_pct']:.2f} %, settling {c['settling_ns']:.1f} ns",
            f"  non-linearity {c['nonlinearity_pct']:.2f} % (max deviation "
            f"{c['max_deviation_pct']:.2f} %); levels {c['trough_mv']:.1f} … {c['peak_mv']:.1f}"
            f" mV (nominal {c['legal_mv'][0]:g} … {c['legal_mv'][1]:g})",
            f"  vs channel 0: delay {c['delay_vs_ch0_ns']:+.2f} ns, gain "
            f"{c['gain_vs_ch0_pct']:+.2f} %"]
        fails = [f"{k} {_num(v['value'])} (limit {_num(v['limit'])})"
                 for k, v in c["checks"].items() if not v["pass"]]
        out.append("  checks: " + ("pass" if not fails else "FAIL " + "; ".join(fails)))
    if "sweep" in rep:
        sw = rep["sweep"]
        out.append(f"sweep of {sw['knob']} ({sw['unit'] or 'no unit'}):")
        for i, v in enumerate(sw["values"]):
            figs = "  ".join(f"ch{ch} -3dB {_fmt_hz(sw['channels'][ch]['f_3db_hz'][i])}, gain "
                             f"{sw['channels'][ch]['dc_gain'][i]:.4f}, nonlin "
                             f"{sw['channels'][ch]['nonlinearity_pct'][i]:.2f} %"
                             for ch in range(3))
            out.append(f"  {v:.6g}: {figs}")
    out += [f"note: {n}" for n in rep.get("notes", [])]
    out.append("overall: " + ("pass" if rep["passed"] else "FAIL (see checks above)"))
    return out


def _num(v) -> str:
    if v is None:
        return "none"
    return f"{v:.4g}" if isinstance(v, float) else str(v)


def _si_prefix(x: float) -> tuple[float, str]:
    """(scale, prefix) putting *x* between 1 and 1000 (µ for 1e-6, k for 1e3, …)."""
    for scale, prefix in ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
                          (1e-6, "µ"), (1e-9, "n"), (1e-12, "p")):
        if x >= scale:
            return scale, prefix
    return 1.0, ""


def write_sheet(path, rep: dict, *, force: bool = False) -> Path:
    """A PNG sheet: swept responses and multiburst, the 2T pulse, the bar's edge, staircase
    step errors and (with a sweep) figures against the knob; axes with units, title with
    chain, temperature and knobs."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from livecurve.media.atomic import atomic_output
    sweep = rep.get("sweep")
    fig, ax = plt.subplots(2, 3, figsize=(15, 8.4), dpi=100)
    ax = ax.ravel()
    live = ", ".join(f"{k}={v:g}" for k, v in rep["live"].items()) or "no knobs"
    fig.suptitle(f"{rep['title']} — {Path(rep['chain']).name} — {rep['format']}, "
                 f"{rep['t_kelvin'] - 273.15:.1f} °C — {live}", fontsize=10)
    colours = ("tab:blue", "tab:orange", "tab:green")
    styles = ("-", "--", ":")
    for c, col, ls in zip(rep["channels"], colours, styles, strict=True):
        f = [p["freq_hz"] / 1e6 for p in c["response"]]
        g = [p["gain_db"] for p in c["response"]]
        ax[0].semilogx(f, g, color=col, ls=ls, label=f"{c['name']} swept")
        ax[0].plot([p["freq_hz"] / 1e6 for p in c["multiburst"]],
                   [p["gain_db"] for p in c["multiburst"]], "o", color=col, ms=4,
                   label=f"{c['name']} multiburst")
        tr = c["pulse"]
        for a, (t0, t1) in ((ax[1], tr["pulse_window_ns"]), (ax[2], tr["edge_window_ns"])):
            sel = [i for i, t in enumerate(tr["t_ns"]) if t0 <= t <= t1]
            a.plot([tr["t_ns"][i] for i in sel], [tr["out_v"][i] * 1e3 for i in sel],
                   marker=".", color=col, ls=ls, lw=1, ms=3, label=c["name"])
        ax[3].plot(range(1, len(c["step_ratios"]) + 1),
                   [100.0 * (r - 1.0) for r in c["step_ratios"]], "o", color=col, ls=ls,
                   label=c["name"])
    tr = rep["channels"][0]["pulse"]
    for a, (t0, t1) in ((ax[1], tr["pulse_window_ns"]), (ax[2], tr["edge_window_ns"])):
        sel = [i for i, t in enumerate(tr["t_ns"]) if t0 <= t <= t1]
        a.plot([tr["t_ns"][i] for i in sel], [tr["in_v"][i] * 1e3 for i in sel], "k:",
               lw=0.8, label="input (ch 0)")
    ax[0].axhline(-3.0, color="grey", lw=0.6, ls="--")
    ax[0].set(xlabel="frequency (MHz)", ylabel="gain re low frequency (dB)",
              title="frequency response")
    ax[1].set(xlabel="time along the line (ns)", ylabel="output (mV, centred)",
              title="2T sine-squared pulse")
    ax[2].set(xlabel="time along the line (ns)", ylabel="output (mV, centred)",
              title="bar, rising edge")
    ax[3].set(xlabel="staircase step", ylabel="step height − mean (%)",
              title="linearity (10-step staircase)")
    if sweep:
        scale, prefix = _si_prefix(max(abs(x) for x in sweep["values"]))
        v = [x / scale for x in sweep["values"]]
        unit = f"{prefix}{sweep['unit']}" if sweep["unit"] else "—"
        for ch, (col, ls) in enumerate(zip(colours, styles, strict=True)):
            f3 = [math.nan if x is None else x / 1e6 for x in sweep["channels"][ch]["f_3db_hz"]]
            ax[4].plot(v, f3, "o", color=col, ls=ls, label=f"ch {ch}")
            ax[5].plot(v, sweep["channels"][ch]["nonlinearity_pct"], "o", color=col, ls=ls,
                       label=f"ch {ch} non-linearity")
            ax[5].plot(v, [100 * g for g in sweep["channels"][ch]["dc_gain"]], "s", color=col,
                       ls=ls, ms=3, alpha=0.6, label=f"ch {ch} DC gain ×100")
        ax[4].set(xlabel=f"{sweep['knob']} ({unit})", ylabel="−3 dB frequency (MHz)",
                  title=f"−3 dB against {sweep['knob']} (missing: above the sweep)")
        ax[5].set(xlabel=f"{sweep['knob']} ({unit})", ylabel="%",
                  title=f"non-linearity and DC gain against {sweep['knob']}")
        ax[4].ticklabel_format(axis="y", useOffset=False)
        lo, hi = ax[4].get_ylim()
        if hi - lo < 1.0:  # a flat figure: show it flat, not magnified noise
            mid = 0.5 * (lo + hi)
            ax[4].set_ylim(mid - 1.0, mid + 1.0)
    else:
        ax[4].axis("off")
        ax[5].axis("off")
    for a in ax:
        if a.axison:
            a.grid(True, lw=0.3)
            a.legend(fontsize=7)
    fig.tight_layout()
    with atomic_output(path, force=force) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return Path(path)
