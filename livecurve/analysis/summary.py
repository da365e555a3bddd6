"""``livecurve check``: refuse what a render would refuse, warn on what is implausible, and
print a one-screen summary of the chain.

Refusals (a :class:`~livecurve.errors.ConfigError` or
:class:`~livecurve.errors.MediaError`, exit 2), the same a render would meet later:

* ``format`` is not a known video format (or ``auto``);
* a ``[control.*]`` block's default ``source`` cannot be read (bad text, missing file,
  a file without audio).  ``clip`` is accepted: whether a clip has a soundtrack is known
  only when one is given (a silent clip holds the knob at its value, with a warning).

Warnings (exit 0, listed under ``WARNINGS`` at the end of the summary):

* a resistor outside 0.1 Ω … 1 GΩ (:data:`R_PLAUSIBLE_OHM`): below, wiring and contact
  resistance are of the same order; above, board leakage and op-amp bias currents
  dominate (common practice, from memory);
* a stage output within :data:`RAIL_MARGIN_V` of an op-amp output limit over the whole
  sweep (stuck at a rail: the stage passes no picture);
* a channel output more than :data:`FAR_OUTSIDE_V` beyond the nominal black/white (or
  chroma) extent, −350 … +350 mV, for an input within that extent (the converter clips a
  large part of the picture);
* a table whose error bound is above the 0.05 mV goal (:data:`TARGET_ERR_V`).

Bandwidth and rise figures are computed at the pixel clock of the chain's ``format`` (for
``auto``: 1080p30's 74.25 MHz, said so in the text).
"""

from __future__ import annotations

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec
from livecurve.engine.tables import TARGET_ERR_V
from livecurve.errors import ConfigError
from livecurve.signal.component import channel_names
from livecurve.units import format_value

#: Resistances a real part can plausibly have, ohms.
R_PLAUSIBLE_OHM = (0.1, 1e9)
#: A stage output this close to an op-amp output limit over the whole sweep is stuck, volts.
RAIL_MARGIN_V = 0.05
#: Nominal signal extent in centred volts: black/white of Y′ (and R′G′B′), chroma peaks.
NOMINAL_V = 0.35
#: An output beyond the nominal extent by more than this, volts, is far outside.
FAR_OUTSIDE_V = 0.35
#: Format whose pixel clock is used when the chain leaves the format to the clip.
DEFAULT_FORMAT = "1080p30"
#: Parameters of the offset pot (shown only for stages that have one).
POT_PARAMS = ("v_ref", "r_pot", "r_end", "trim")


def value_text(v: float, unit: str) -> str:
    """A value as written on a schematic: ``0.955`` (plain numbers and fractions stay
    plain), ``10 kΩ``, ``60 µA``, ``-12 V``."""
    if unit in ("", None):
        return f"{v:.4g}"
    return format_value(v, unit)


def has_pot(stage) -> bool:
    """Whether a stage uses the offset pot (its v_ref, r_pot, r_end, trim mean something)."""
    if stage.kind == "noninverting_gain":
        return True
    return stage.kind == "inverting_gain" and stage.params.get("r_off", 0.0) > 0


def _fmt_params(st, values: dict | None = None) -> str:
    from livecurve.circuit.stages import KINDS
    if st.kind == "netlist":
        return f"{len(st.elements)} elements"
    kind = KINDS[st.kind]
    vals = {**st.params, **(values or {})}
    pot = has_pot(st)
    parts = []
    for p in kind.params:
        v = vals.get(p.name)
        if v is None or (p.default == 0.0 and v == 0.0):
            continue
        if p.name in POT_PARAMS and not pot:
            continue
        parts.append(f"{p.name}={value_text(v, p.unit)}")
    if st.device is not None:
        parts.append(f"{getattr(st.device, 'polarity', 'diode')} IS="
                     f"{value_text(st.device.is_a, 'A')}")
    if st.legs:
        parts.append(f"{len(st.legs)} legs")
    return ", ".join(parts)


def dynamics_figures(dyn, pixel_period_s: float) -> dict:
    """−3 dB bandwidth (Hz), 10–90 % rise time (s) and overshoot (fraction) of a stage at
    the pixel clock 1/*pixel_period_s*."""
    from livecurve.engine.dynamics import figures_at_format
    f = figures_at_format(dyn, pixel_clock_hz=1.0 / pixel_period_s, step_v=0.7)
    return {k: f[k] for k in ("bw_hz", "rise_s", "overshoot")}


def chain_timing(spec: ChainSpec):
    """(VideoFormat, note) the dynamics figures use: the chain's format, or 1080p30 for
    ``auto``.  Raises ConfigError (naming the file) for an unknown format."""
    from livecurve.signal.timing import get_format
    name = DEFAULT_FORMAT if spec.format == "auto" else spec.format
    try:
        fmt = get_format(name)
    except ConfigError as exc:
        raise ConfigError(str(exc).split(": ", 1)[-1], path=spec.path, key="format",
                          value=spec.format) from None
    note = (f"format auto: figures at {fmt.name}'s {fmt.pixel_clock_hz / 1e6:.2f} MHz "
            "pixel clock" if spec.format == "auto"
            else f"format {fmt.name}, {fmt.pixel_clock_hz / 1e6:.4g} MHz pixel clock")
    return fmt, note


def check_controls(spec: ChainSpec) -> list[str]:
    """Check every control block's default source as a render would read it.

    Returns one line per block; raises ConfigError / MediaError (naming the file and the
    block) for a source a render would refuse.
    """
    from livecurve.control.spec import check_source
    from livecurve.errors import MediaError
    lines = []
    for name, cs in spec.controls.items():
        if not cs.source:
            lines.append(f"{name} → {cs.drives}: no default source (give --control)")
            continue
        try:
            check_source(cs.source)
        except ConfigError as exc:
            raise ConfigError(f"a render would refuse this source: {exc}", path=spec.path,
                              key=f"control.{name}.source") from None
        except MediaError as exc:
            raise MediaError(f"{spec.path}: key 'control.{name}.source': a render would "
                             f"refuse this source: {exc}") from None
        lines.append(f"{name} → {cs.drives}: source {cs.source}")
    return lines


def plausibility(spec: ChainSpec, engine=None, *, points: int = 101) -> list[str]:
    """Warnings about a chain that loads but is unlikely to be what was meant (see the
    module docstring for each rule and its threshold)."""
    m = ChainModel(spec)
    names = channel_names(spec.space)
    op = spec.opamp
    lo_lim, hi_lim = op.v_neg_v + op.headroom_v, op.v_pos_v - op.headroom_v
    warn = []
    r_lo, r_hi = R_PLAUSIBLE_OHM
    seen = set()
    for ch in range(3):
        for st in m.stages_for(ch):
            for el in m.netlist(ch, st).elements:
                if el.kind != "R" or (st.id, el.name, el.value) in seen:
                    continue
                seen.add((st.id, el.name, el.value))
                if not r_lo <= el.value <= r_hi:
                    warn.append(f"stage '{st.id}' (channel {ch}): resistor {el.name} = "
                                f"{value_text(el.value, 'ohm')} is outside the plausible "
                                f"{value_text(r_lo, 'ohm')} … {value_text(r_hi, 'ohm')}")
    for ls in spec.live.values():
        if ls.unit == "ohm" and not (r_lo <= ls.lo and ls.hi <= r_hi):
            warn.append(f"knob '{ls.name}': range {value_text(ls.lo, 'ohm')} … "
                        f"{value_text(ls.hi, 'ohm')} reaches outside the plausible "
                        f"{value_text(r_lo, 'ohm')} … {value_text(r_hi, 'ohm')}")
    vin = np.linspace(*spec.sweep_v, points)
    inside = np.abs(vin) <= NOMINAL_V + 1e-12
    for ch in range(3):
        stages = m.stages_for(ch)
        if not stages:
            continue
        v = vin
        for st in stages:
            v = m.transfer(ch, v, stages=[st])
            for lim, word in ((hi_lim, "positive"), (lo_lim, "negative")):
                if np.all(np.abs(v - lim) <= RAIL_MARGIN_V):
                    warn.append(f"stage '{st.id}' (channel {ch}, {names[ch]}): output stuck "
                                f"at the {word} output limit ({lim:+.2f} V) over the whole "
                                f"sweep {spec.sweep_v[0]:+g} … {spec.sweep_v[1]:+g} V")
        if inside.any():
            worst = float(np.max(np.abs(v[inside])))
            if worst > NOMINAL_V + FAR_OUTSIDE_V:
                warn.append(f"channel {ch} ({names[ch]}): output reaches {worst * 1e3:+.0f} "
                            f"mV for inputs within ±{NOMINAL_V * 1e3:.0f} mV, far outside "
                            f"the nominal ±{NOMINAL_V * 1e3:.0f} mV (the converter clips it)")
    if engine is not None:
        for row in engine.summary_rows():
            if (row["err_v"] or 0) > TARGET_ERR_V:
                warn.append(f"table ch{row['channel']} [{'+'.join(row['stages'])}]: error "
                            f"bound {row['err_v'] * 1e3:.4f} mV is above the "
                            f"{TARGET_ERR_V * 1e3:g} mV goal (the grid reached its size limit "
                            "on a steep part of the curve)")
    return warn


def chain_summary(spec: ChainSpec, engine=None, *, pixel_period_s: float | None = None) -> str:
    """Check the chain and return the text ``livecurve check`` prints.

    Parameters
    ----------
    engine : FrameEngine, optional
        Its tables are listed (size, error bound, build time).
    pixel_period_s : float, optional
        Pixel period for the dynamics figures; default that of the chain's ``format``.

    Raises
    ------
    ConfigError, MediaError
        What a render would refuse (unknown format, unreadable control source).
    """
    from livecurve.engine.pipeline import stage_dynamics
    fmt, fmt_note = chain_timing(spec)
    period = fmt.pixel_period_s if pixel_period_s is None else pixel_period_s
    control_lines = check_controls(spec)
    m = ChainModel(spec)
    names = channel_names(spec.space)
    op = spec.opamp
    lines = [f"{spec.title}  ({spec.path})",
             f"  signal {spec.space} / {spec.standard}, ambient "
             f"{spec.ambient_k - 273.15:.1f} °C, rails {op.v_neg_v:+g} V / {op.v_pos_v:+g} V, "
             f"op-amp A={op.a_ol:.3g}, headroom {op.headroom_v:g} V",
             f"  output converter {spec.converter_bits}-bit "
             f"{'legal' if spec.converter_legal else 'full'} range; sweep "
             f"{spec.sweep_v[0]:+g} … {spec.sweep_v[1]:+g} V; {fmt_note}"]
    probe = np.array([-0.35, -0.001, 0.0, 0.001, 0.35])
    for ch in range(3):
        stages = m.stages_for(ch)
        if not stages:
            lines.append(f"  channel {ch} ({names[ch]}): passes straight through")
            continue
        y = m.transfer(ch, probe)
        gain0 = (y[3] - y[1]) / 0.002
        lines.append(f"  channel {ch} ({names[ch]}): {len(stages)} stage(s); out at −350/0/+350 mV "
                     f"= {y[0]*1e3:+.1f}/{y[2]*1e3:+.1f}/{y[4]*1e3:+.1f} mV; gain at 0 V "
                     f"{gain0:+.3f}")
        for st in stages:
            lines.append(f"    - {st.id:<12} {st.kind:<18} "
                         f"{_fmt_params(st, m.values(ch, st))}")
            dyn = stage_dynamics(st, spec.opamp, m.netlist(ch, st))
            if dyn is not None:
                f = dynamics_figures(dyn, period)
                bw = ("above the pixel-clock Nyquist" if not np.isfinite(f["bw_hz"])
                      else f"{f['bw_hz'] / 1e6:.2f} MHz")
                lines.append(f"      dynamics: −3 dB {bw}, rise "
                             f"{f['rise_s'] * 1e9:.1f} ns, overshoot {100 * f['overshoot']:.1f} %")
    if engine is not None:
        for row in engine.summary_rows():
            lines.append(f"  table ch{row['channel']} [{'+'.join(row['stages'])}]"
                         f"{' knob ' + row['knob'] if row['knob'] else ''}: "
                         f"{'×'.join(map(str, row['table_n'] or ()))} points, bound "
                         f"{(row['err_v'] or 0) * 1e3:.4f} mV, built in "
                         f"{row['build_s'] * 1e3:.1f} ms")
    if spec.live:
        lines.append("  live parameters:")
        for ls in spec.live.values():
            lines.append(f"    - {ls.name:<14} {ls.stage}.{ls.param}: "
                         f"{value_text(ls.value, ls.unit)}  ({value_text(ls.lo, ls.unit)} … "
                         f"{value_text(ls.hi, ls.unit)})")
    if control_lines:
        lines.append("  controls:")
        lines += [f"    - {c}" for c in control_lines]
    warnings = plausibility(spec, engine)
    if warnings:
        lines.append(f"WARNINGS ({len(warnings)}; the chain loads, but check these):")
        lines += [f"  ! {w}" for w in warnings]
    else:
        lines.append("check: no warnings")
    return "\n".join(lines)
