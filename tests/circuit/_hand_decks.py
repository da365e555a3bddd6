"""Reference decks for each stage kind, written by hand from the schematic each kind
documents (docs/chain-files.md, "Stage kinds"), and run in ngspice.

Nothing here uses livecurve's netlist, deck writer or solver: every deck below is plain
SPICE text composed from the component values, so a wrong wire or a misread parameter in
``livecurve.circuit.stages`` shows up as a difference against these decks.

The op-amp is a finite-gain voltage-controlled voltage source (``E`` element, gain A = 2e5,
the chain's default open-loop gain) with its non-inverting input first: the usual
"finite-gain op-amp" of any op-amp text.  Sweeps stay well inside the ±10.5 V output swing
of the default ±12 V rails, where livecurve's op-amp law and a linear gain agree to within
microvolts.

Reference: ngspice 39 (Debian package ``ngspice``), batch mode, with the tight options
REFERENCES.md asks for (RELTOL = 1e-7, VNTOL = 1e-10, ABSTOL = 1e-16).
"""

from __future__ import annotations

import subprocess
from pathlib import Path

import numpy as np

A_OL = 2e5  # finite open-loop gain of the reference op-amp (chain default)


def opamp(name: str, plus: str, minus: str, out: str) -> str:
    """A finite-gain op-amp as a VCVS: E<name> out 0 plus minus A."""
    return f"E{name} {out} 0 {plus} {minus} {A_OL:g}"


def diode_card(name: str, dev) -> str:
    """A SPICE level-1 diode ``.model`` card from a DiodeModel's values."""
    return (f".model {name} D(IS={dev.is_a:.10g} N={dev.n:.10g} RS={dev.rs_ohm:.10g} "
            f"EG={dev.eg_ev:.10g} XTI={dev.xti:.10g})")


def bjt_card(name: str, dev) -> str:
    """A Gummel–Poon ``.model`` card (transport part only) from a BjtModel's values."""
    return (f".model {name} {dev.polarity.upper()}(IS={dev.is_a:.10g} BF={dev.bf:.10g} "
            f"BR={dev.br:.10g} NF={dev.nf:.10g} NR={dev.nr:.10g} EG={dev.eg_ev:.10g} "
            f"XTI={dev.xti:.10g} XTB={dev.xtb:.10g} RE={dev.re_ohm:.10g} "
            f"RB={dev.rb_ohm:.10g} RC={dev.rc_ohm:.10g})")


def junction(name: str, anode: str, cathode: str, dev, sum_node: str) -> list[str]:
    """A junction conducting from *anode* to *cathode*.

    A diode is just that.  A transistor is a transdiode (AN-30 / MT-077): collector on the
    op-amp's summing node, base grounded, emitter on the other end.  An NPN conducts from
    collector to emitter and a PNP from emitter to collector.
    """
    if not hasattr(dev, "polarity"):
        return [f"D{name} {anode} {cathode} m{name}", diode_card(f"m{name}", dev)]
    other = cathode if anode == sum_node else anode
    return [f"Q{name} {sum_node} 0 {other} m{name}", bjt_card(f"m{name}", dev)]


def pot_divider(p: dict, wiper: str) -> list[str]:
    """±Vref across end-stop, pot track, end-stop; wiper at ``trim`` (0 = the −Vref end)."""
    t = p["trim"]
    return [f"VRP rp 0 {p['v_ref']:.12g}",
            f"VRN rn 0 {-p['v_ref']:.12g}",
            f"RENDP rp tp {p['r_end']:.12g}",
            f"RTRKP tp {wiper} {p['r_pot'] * (1.0 - t):.12g}",
            f"RTRKN {wiper} tn {p['r_pot'] * t:.12g}",
            f"RENDN tn rn {p['r_end']:.12g}"]


# ---- the kinds, one hand-drawn schematic each -------------------------------------------

def inverting_gain(p: dict, dev=None, legs=()) -> list[str]:
    lines = [f"RIN in sum {p['r_in']:.12g}", f"RF sum out {p['r_f']:.12g}",
             opamp("OP", "0", "sum", "out")]
    if p.get("r_off", 0.0) > 0:
        lines += [f"ROFF wip sum {p['r_off']:.12g}", *pot_divider(p, "wip")]
    return lines


def noninverting_gain(p: dict, dev=None, legs=()) -> list[str]:
    return [f"RG wip sum {p['r_g']:.12g}", f"RF sum out {p['r_f']:.12g}",
            opamp("OP", "in", "sum", "out"), *pot_divider(p, "wip")]


def log_transdiode(p: dict, dev, legs=()) -> list[str]:
    lines = [f"RIN in sum {p['r_in']:.12g}", opamp("OP", "0", "sum", "out"),
             *junction("1", "sum", "out", dev, "sum")]
    if p.get("i_ref", 0.0) != 0:
        lines.append(f"IREF 0 sum {p['i_ref']:.12g}")  # flows into the summing node
    return lines


def _other_polarity(dev):
    if not hasattr(dev, "polarity"):
        return dev
    return dev.scaled(polarity="pnp" if dev.polarity == "npn" else "npn")


def log_bipolar(p: dict, dev, legs=()) -> list[str]:
    lines = [f"RIN in sum {p['r_in']:.12g}", opamp("OP", "0", "sum", "out"),
             *junction("1", "sum", "out", dev, "sum"),
             *junction("2", "out", "sum", _other_polarity(dev), "sum")]
    if p.get("r_f", 0.0) > 0:
        lines.append(f"RF sum out {p['r_f']:.12g}")
    return lines


def soft_limiter(p: dict, dev, legs=()) -> list[str]:
    return [f"RIN in sum {p['r_in']:.12g}", f"RF sum out {p['r_f']:.12g}",
            opamp("OP", "0", "sum", "out"),
            # leg for a positive output swing (negative input): out -> diode -> Rk -> sum
            f"RKA sum ka {p['r_k']:.12g}", "DA out ka mlim",
            # leg for a negative output swing (positive input): sum -> Rk -> diode -> out
            f"RKB sum kb {p['r_k']:.12g}", "DB kb out mlim",
            diode_card("mlim", dev)]


def breakpoint_shaper(p: dict, dev, legs=()) -> list[str]:
    lines = [f"RIN in sum {p['r_in']:.12g}", f"RF sum out {p['r_f']:.12g}",
             opamp("OP", "0", "sum", "out"), diode_card("mbrk", dev)]
    for k, leg in enumerate(legs):
        lines += [f"RSER{k} in n{k} {leg['r_series']:.12g}",
                  f"RBIA{k} n{k} b{k} {leg['r_bias']:.12g}",
                  f"VBIA{k} b{k} 0 {leg['v_bias']:.12g}"]
        if leg["direction"] == "rising":
            lines.append(f"DBRK{k} n{k} sum mbrk")
        else:
            lines.append(f"DBRK{k} sum n{k} mbrk")
    return lines


def antilog(p: dict, dev, legs=()) -> list[str]:
    src = "in"
    lines = [f"RF sum out {p['r_f']:.12g}", opamp("OP", "0", "sum", "out")]
    if p.get("r_att_top", 0.0) > 0:
        lines += [f"RATA in att {p['r_att_top']:.12g}", f"RATB att 0 {p['r_att_bottom']:.12g}"]
        src = "att"
    lines += junction("1", src, "sum", dev, "sum")
    if p.get("i_bias", 0.0) != 0:
        lines.append(f"IBIA sum 0 {p['i_bias']:.12g}")  # drawn out of the summing node
    return lines


HAND = {"inverting_gain": inverting_gain, "noninverting_gain": noninverting_gain,
        "log_transdiode": log_transdiode, "log_bipolar": log_bipolar,
        "soft_limiter": soft_limiter, "breakpoint_shaper": breakpoint_shaper,
        "antilog": antilog}


def run_sweep(ngspice: str, body: list[str], vin_v: np.ndarray, t_kelvin: float,
              workdir: Path, tag: str) -> np.ndarray:
    """v(out) of the hand-written circuit *body* for the uniform input sweep *vin_v*.

    The input source is ``VIN in 0``; the deck is written here in full and ngspice's
    ``wrdata`` columns are read back with numpy (no livecurve code involved).
    """
    data = workdir / f"{tag}.dat"
    step = (vin_v[-1] - vin_v[0]) / (len(vin_v) - 1)
    deck = "\n".join([
        f"* hand-written reference: {tag}",
        ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16 ITL1=500 ITL2=500",
        f".temp {t_kelvin - 273.15:.6f}",
        "VIN in 0 DC 0",
        *body,
        f".dc VIN {vin_v[0]:.12g} {vin_v[-1]:.12g} {step:.12g}",
        ".control",
        "set wr_singlescale",
        "run",
        f"wrdata {data.name} v(out)",
        "quit",
        ".endc",
        ".end", ""])
    path = workdir / f"{tag}.cir"
    path.write_text(deck)
    proc = subprocess.run([ngspice, "-b", path.name], capture_output=True, text=True,
                          timeout=120, cwd=workdir)
    text = proc.stdout + proc.stderr
    assert proc.returncode == 0, f"ngspice exited {proc.returncode}:\n{text[-2000:]}"
    bad = [ln for ln in text.splitlines() if ln.lower().lstrip().startswith("error")]
    assert not bad, "ngspice reported errors:\n" + "\n".join(bad) + "\n" + deck
    cols = np.loadtxt(data, ndmin=2)
    assert cols.shape[0] == len(vin_v), (cols.shape, len(vin_v))
    np.testing.assert_allclose(cols[:, 0], vin_v, atol=1e-9)
    return cols[:, 1]
