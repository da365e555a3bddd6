"""The one-screen summary ``livecurve check`` prints."""

from __future__ import annotations

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec
from livecurve.engine.tables import TARGET_ERR_V
from livecurve.signal.component import channel_names
from livecurve.units import format_value

_UNIT_SYM = {"ohm": "ohm", "A": "A", "V": "V", "F": "F", "Hz": "Hz", "s": "s", "": ""}


def _fmt_params(st) -> str:
    from livecurve.circuit.stages import KINDS
    if st.kind == "netlist":
        return f"{len(st.elements)} elements"
    kind = KINDS[st.kind]
    parts = []
    for p in kind.params:
        v = st.params.get(p.name)
        if v is None or (p.default == 0.0 and v == 0.0):
            continue
        parts.append(f"{p.name}={format_value(v, _UNIT_SYM.get(p.unit, ''))}")
    if st.device is not None:
        parts.append(f"{getattr(st.device, 'polarity', 'diode')} IS="
                     f"{st.device.is_a:.3g}")
    if st.legs:
        parts.append(f"{len(st.legs)} legs")
    return ", ".join(parts)


def dynamics_figures(dyn, pixel_period_s: float) -> dict:
    """−3 dB bandwidth (Hz), 10–90 % rise time (s) and overshoot (fraction) of a stage."""
    from livecurve.engine import dynamics as d
    return {"bw_hz": d.bandwidth_3db_hz(dyn, pixel_period_s=pixel_period_s),
            "rise_s": d.rise_time_s(dyn, pixel_period_s=pixel_period_s, step_v=0.7),
            "overshoot": d.overshoot_fraction(dyn, pixel_period_s=pixel_period_s, step_v=0.7)}


def chain_summary(spec: ChainSpec, engine=None, *, pixel_period_s: float = 1 / 74.25e6) -> str:
    """Text summary: signal, supply, stages per channel with gains, tables and dynamics."""
    from livecurve.engine.pipeline import stage_dynamics
    m = ChainModel(spec)
    names = channel_names(spec.space)
    op = spec.opamp
    lines = [f"{spec.title}  ({spec.path})",
             f"  signal {spec.space} / {spec.standard}, ambient "
             f"{spec.ambient_k - 273.15:.1f} °C, rails {op.v_neg_v:+g} V / {op.v_pos_v:+g} V, "
             f"op-amp A={op.a_ol:.3g}, headroom {op.headroom_v:g} V",
             f"  output converter {spec.converter_bits}-bit "
             f"{'legal' if spec.converter_legal else 'full'} range; sweep "
             f"{spec.sweep_v[0]:+g} … {spec.sweep_v[1]:+g} V"]
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
            lines.append(f"    - {st.id:<12} {st.kind:<18} {_fmt_params(st)}")
            dyn = stage_dynamics(st)
            if dyn is not None:
                f = dynamics_figures(dyn, pixel_period_s)
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
                         f"{row['build_s'] * 1e3:.1f} ms"
                         + ("  (above the 0.05 mV goal: the grid reached its size limit "
                            "on a steep part of the curve)"
                            if (row['err_v'] or 0) > TARGET_ERR_V else ""))
    if spec.live:
        lines.append("  live parameters:")
        for ls in spec.live.values():
            u = _UNIT_SYM.get(ls.unit, "")
            lines.append(f"    - {ls.name:<14} {ls.stage}.{ls.param}: {format_value(ls.value, u)}"
                         f"  ({format_value(ls.lo, u)} … {format_value(ls.hi, u)})")
    return "\n".join(lines)
