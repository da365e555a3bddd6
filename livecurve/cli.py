"""Command line: argument parsing only; each verb calls one function of the package.

Adding a verb: write ``_verb_NAME(sub)`` that calls :func:`add_verb` (help line, example
epilog) and adds its arguments (each with a help text giving its unit and an example), then
append it to :data:`VERBS`.  Every verb that writes files takes ``--force``; without it an
existing output is refused with exit 3 and left untouched.

Exit status: 0 done, 2 bad input (chain file, argument, media, device), 3 an output could
not be written, 128 + N when signal N (SIGINT 2, SIGHUP 1, SIGTERM 15) stopped the run —
temporary files are removed first.
"""

from __future__ import annotations

import argparse
import signal
import sys
import textwrap

from livecurve import __version__
from livecurve.errors import LivecurveError, OutputInterrupted, Stopped

#: Sweep points accepted by ``curve`` and ``export`` (a curve needs two ends; the upper bound
#: keeps a deck and a CSV to a size people open).
POINTS_RANGE = (2, 100_000)


# ---- argument types (argparse reports their errors with exit 2) ------------------------------
def _int_in(lo: int, hi: int, what: str):
    def conv(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a whole number {lo}…{hi}, got "
                                             f"{text!r}") from None
        if not lo <= v <= hi:
            raise argparse.ArgumentTypeError(f"{what} must be {lo}…{hi}, got {text!r}")
        return v
    conv.__name__ = what
    return conv


def _seconds(text: str) -> float:
    import math
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected seconds, e.g. 2.5; got {text!r}") from None
    if not math.isfinite(v) or v < 0:
        raise argparse.ArgumentTypeError(f"seconds must be 0 or more, got {text!r}")
    return v


def _positive(text: str) -> float:
    import math
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, e.g. 60; got {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"must be a number above 0, got {text!r}")
    return v


# ---- helpers the verbs share -------------------------------------------------------------------
def _chain(path):
    from livecurve.config.chainfile import load_chain
    return load_chain(path)


def _temp(args):
    from livecurve.units import parse_temperature_k
    return None if args.temp_c is None else parse_temperature_k(args.temp_c, key="--temp-c")


def _live(spec, args):
    """Knob values from ``--set NAME=VALUE`` options (checked against the knob's range)."""
    from livecurve.errors import ConfigError
    from livecurve.units import format_value, parse_value
    out = {}
    for item in getattr(args, "set", None) or []:
        if "=" not in item:
            raise ConfigError("expected NAME=VALUE", key="--set", value=item)
        name, val = item.split("=", 1)
        if name not in spec.live:
            raise ConfigError(f"no live parameter '{name}'; live: "
                              f"{', '.join(spec.live) or 'none'}", key="--set", value=item)
        ls = spec.live[name]
        v = parse_value(val, ls.unit, key=f"--set {name}")
        if not ls.lo <= v <= ls.hi:
            raise ConfigError(f"outside {format_value(ls.lo, ls.unit)} … "
                              f"{format_value(ls.hi, ls.unit)}", key=f"--set {name}", value=val)
        out[name] = v
    return out or None


def _outputs_free(*paths, force: bool) -> None:
    """Refuse (exit 3) before any work when one of the outputs exists without --force."""
    from livecurve.media.atomic import check_target
    for p in paths:
        if p:
            check_target(p, force=force)


# ---- the verbs ----------------------------------------------------------------------------------
def cmd_check(args) -> int:
    from livecurve.analysis.summary import chain_summary
    from livecurve.engine.pipeline import FrameEngine
    spec = _chain(args.chain)
    eng = FrameEngine(spec)
    print(chain_summary(spec, eng))
    return 0


def cmd_curve(args) -> int:
    from livecurve.outputs import curves
    if not (args.csv or args.png):
        raise LivecurveError("curve: give --csv OUT.csv and/or --png OUT.png")
    _outputs_free(args.csv, args.png, force=args.force)
    spec = _chain(args.chain)
    if args.step:
        from livecurve.outputs.steps import write_steps
        write_steps(spec, csv=args.csv, png=args.png, force=args.force)
        return 0
    t_kelvin, live = _temp(args), _live(spec, args)
    vin, vout = curves.curves(spec, points=args.points, t_kelvin=t_kelvin, live=live)
    if args.csv:
        curves.write_curve_csv(args.csv, vin, vout, force=args.force)
        print(f"wrote {args.csv} ({len(vin)} points)")
    if args.png:
        curves.write_curve_png(args.png, vin, vout, spec, t_kelvin=t_kelvin, live=live,
                               force=args.force)
        print(f"wrote {args.png}")
    return 0


def cmd_export(args) -> int:
    if not (args.spice or args.clf):
        raise LivecurveError("export: give --spice OUT.cir and/or --clf OUT.clf")
    _outputs_free(args.spice, args.clf, force=args.force)
    spec = _chain(args.chain)
    if args.spice:
        from livecurve.outputs.curves import write_spice
        write_spice(args.spice, spec, t_kelvin=_temp(args), live=_live(spec, args),
                    points=args.points, force=args.force)
        print(f"wrote {args.spice}")
    if args.clf:
        from livecurve.outputs.clf import write_clf
        write_clf(args.clf, spec, t_kelvin=_temp(args), live=_live(spec, args),
                  force=args.force)
        print(f"wrote {args.clf}")
    return 0


def cmd_render(args) -> int:
    from livecurve.outputs.render import render
    spec = _chain(args.chain)
    rep = render(spec, args.source, args.output, start_s=args.start, duration_s=args.duration,
                 codec=args.codec, side_by_side=args.side_by_side, force=args.force,
                 exact=args.exact, controls=args.control, progress=not args.quiet,
                 t_kelvin=_temp(args), drift=args.drift)
    print(f"wrote {rep.output}: {rep.frames} frames in {rep.seconds:.1f} s "
          f"({rep.fps:.1f} fps); table bound {rep.table_bound_v * 1e3:.3f} mV")
    if rep.flash:
        ok = rep.flash.startswith("flash check: ok")
        print(rep.flash, file=sys.stdout if ok else sys.stderr)
    return 0


def cmd_demo(args) -> int:
    from livecurve.outputs.demo import run_demo
    run_demo(args.out, force=args.force, quick=args.quick)
    return 0


def cmd_devices(args) -> int:
    from livecurve.control.live import list_inputs
    inputs = list_inputs()
    if not inputs:
        print("no audio inputs found (is libportaudio2 installed and a capture device present?)")
        return 0
    print("audio inputs (use --control NAME=device:INDEX or device:NAME):")
    for idx, name, ch, rate in inputs:
        print(f"  {idx:3d}  {name}  ({ch} ch, {rate:g} Hz)")
    return 0


def cmd_preview(args) -> int:
    from livecurve.preview.window import run_preview
    return int(run_preview(args.chain, args.source, snapshot=args.snapshot, at_s=args.at,
                           controls=args.control or (), exact=args.exact,
                           monitors=args.monitors, max_frames=args.max_frames,
                           force=args.force, drift=args.drift, speedup=args.speedup) or 0)


DRIFT_FILES = ("drift.csv", "drift.png", "drift_strip.png")
SPREAD_FILES = ("spread.csv", "spread.json", "spread.png")


def cmd_drift(args) -> int:
    from livecurve.analysis.drift import run_drift, temperature_steps
    from livecurve.media.atomic import atomic_folder, check_folder_target
    from livecurve.units import parse_temperature_k
    check_folder_target(args.out, DRIFT_FILES, force=args.force)
    spec = _chain(args.chain)
    from_k = parse_temperature_k(args.from_t, key="--from")
    to_k = parse_temperature_k(args.to_t, key="--to")
    temperature_steps(from_k, to_k, args.steps)  # refuse bad arguments before any folder
    with atomic_folder(args.out, DRIFT_FILES, force=args.force) as tmp:
        rep = run_drift(spec, from_k=from_k, to_k=to_k, steps=args.steps,
                        csv=tmp / DRIFT_FILES[0], png=tmp / DRIFT_FILES[1],
                        strip_png=tmp / DRIFT_FILES[2], frame_source=args.frame, force=True)
    print("\n".join(line.replace(str(tmp), str(args.out)) for line in rep.lines()))
    return 0


def cmd_spread(args) -> int:
    from livecurve.analysis.spread import run_spread
    from livecurve.media.atomic import atomic_folder, check_folder_target
    check_folder_target(args.out, SPREAD_FILES, force=args.force)
    spec = _chain(args.chain)
    scheduler = _spread_scheduler(args)  # a bad address is refused before any folder
    with atomic_folder(args.out, SPREAD_FILES, force=args.force) as tmp:
        rep = run_spread(spec, trials=args.trials, seed=args.seed, csv=tmp / SPREAD_FILES[0],
                         json=tmp / SPREAD_FILES[1], png=tmp / SPREAD_FILES[2],
                         progress=not args.quiet, force=True, scheduler=scheduler)
    print("\n".join(line.replace(str(tmp), str(args.out)) for line in rep.lines()))
    return 0


def _spread_scheduler(args):
    """``spread``: the --scheduler address, a local cluster for large --trials, else None."""
    from livecurve.analysis.spread import LOCAL_CLUSTER_TRIALS
    from livecurve.outputs.cluster import scheduler_address
    addr = scheduler_address(args.scheduler)
    if addr is None and args.trials >= LOCAL_CLUSTER_TRIALS:
        return "local"
    return addr


def cmd_batch(args) -> int:
    from livecurve.outputs.batch import plan_batch
    from livecurve.outputs.batchrun import run_batch
    from livecurve.outputs.cluster import scheduler_address
    items, specs = plan_batch(args.chain, args.source, sets=args.set or (),
                              temps=args.temp_c or (), codec=args.codec,
                              segment_s=args.segment_s)
    rep = run_batch(items, specs, args.out, codec=args.codec, force=args.force,
                    scheduler=scheduler_address(args.scheduler), progress=not args.quiet,
                    n_workers=args.workers)
    print("\n".join(rep.lines()))
    return 1 if rep.failed else 0


def cmd_measure(args) -> int:
    from livecurve.analysis.measure_report import report_lines, run_measure
    _outputs_free(args.json, args.png, force=args.force)
    spec = _chain(args.chain)
    rep = run_measure(spec, fmt=args.format, t_kelvin=_temp(args), live=_live(spec, args),
                      json_out=args.json, png_out=args.png, force=args.force, sweep=args.sweep)
    print("\n".join(report_lines(rep)))
    for out in (args.json, args.png):
        if out:
            print(f"wrote {out}")
    return 0


# ---- the parser ---------------------------------------------------------------------------------
def add_verb(sub, name: str, help_text: str, examples: str, func):
    """A sub-command with a one-line help, an ``examples:`` epilog kept as written, and the
    function it calls."""
    c = sub.add_parser(name, help=help_text, description=help_text,
                       epilog="examples:\n" + textwrap.indent(textwrap.dedent(examples).strip(),
                                                              "  "),
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    c.set_defaults(func=func)
    return c


def _chain_arg(c, positional: bool = True):
    text = "chain file (TOML, see docs/chain-files.md), e.g. configs/night_knee.toml"
    if positional:
        c.add_argument("chain", help=text)
    else:
        c.add_argument("--chain", required=True, metavar="CHAIN.toml", help=text)


def _temp_arg(c, default: str):
    c.add_argument("--temp-c", metavar="TEMP",
                   help="junction temperature, °C (or with a unit: 40C, 313.15K), "
                        f"-55…150 °C, e.g. --temp-c 40 (default: {default})")


def _set_arg(c):
    c.add_argument("--set", action="append", metavar="NAME=VALUE",
                   help="set a live parameter of the chain, in its own unit and within its "
                        "range, e.g. --set knee_current=80uA (repeatable)")


def _force_arg(c, what: str):
    c.add_argument("--force", action="store_true",
                   help=f"replace {what} if it exists (default: refuse, exit 3)")


def _points_arg(c):
    c.add_argument("--points", type=_int_in(*POINTS_RANGE, "--points"), default=501,
                   metavar="N", help="sweep points over the chain's [sweep] range, "
                                     f"{POINTS_RANGE[0]}…{POINTS_RANGE[1]}, e.g. --points 1001 "
                                     "(default 501)")


def _verb_check(sub):
    c = add_verb(sub, "check", "validate a chain file and print its summary",
                 "livecurve check configs/night_knee.toml", cmd_check)
    _chain_arg(c)


def _verb_curve(sub):
    c = add_verb(sub, "curve", "DC transfer (or step response) of every channel", """
        livecurve curve configs/night_knee.toml --csv knee.csv --png knee.png
        livecurve curve configs/night_knee.toml --csv hot.csv --temp-c 60 --set knee_current=80uA
        livecurve curve configs/film_shoulder.toml --step --png step.png
        """, cmd_curve)
    _chain_arg(c)
    c.add_argument("--csv", metavar="OUT.csv",
                   help="write the curves as CSV (volts: input_v,out0_v,out1_v,out2_v), "
                        "e.g. --csv knee.csv")
    c.add_argument("--png", metavar="OUT.png",
                   help="write a plot of the curves (output volts against input volts); "
                        ".png, .svg or .pdf by the extension, e.g. --png knee.png")
    _points_arg(c)
    _temp_arg(c, "the chain's ambient")
    _set_arg(c)
    c.add_argument("--step", action="store_true",
                   help="write each channel's step response instead (time in ns, volts; "
                        "line-rate dynamics), e.g. --step --csv step.csv")
    _force_arg(c, "the CSV/PNG")


def _verb_export(sub):
    c = add_verb(sub, "export", "write a SPICE deck and/or a CLF LUT of the chain", """
        livecurve export configs/night_knee.toml --spice knee.cir
        livecurve export configs/film_shoulder.toml --clf look.clf --temp-c 40
        """, cmd_export)
    _chain_arg(c)
    c.add_argument("--spice", metavar="OUT.cir",
                   help="write an ngspice deck sweeping the chain, e.g. --spice knee.cir")
    c.add_argument("--clf", metavar="OUT.clf",
                   help="write the static curve as a CLF v3 LUT (R′G′B′ 0…1), "
                        "e.g. --clf look.clf")
    _points_arg(c)
    _temp_arg(c, "the chain's ambient")
    _set_arg(c)
    _force_arg(c, "the deck/LUT")


def _verb_render(sub):
    c = add_verb(sub, "render", "put a clip, still, sequence or camera through a chain", """
        livecurve render clips/demo.mp4 out.mp4 --chain configs/shadow_crush.toml
        livecurve render still.png out.png --chain configs/film_shoulder.toml
        livecurve render clips/demo.mp4 out.mp4 --chain configs/night_knee.toml \\
            --control knee_current=lfo:sine:2Hz:1V --start 1.5 --duration 4
        """, cmd_render)
    c.add_argument("source", help="clip file, still, image sequence (shot_%%04d.png) or "
                                  "camera:N, e.g. clips/demo.mp4")
    c.add_argument("output", help=".mp4/.mov/.mkv for clips, .png/.tif for stills (16-bit), "
                                  "e.g. out.mp4; never the source itself")
    _chain_arg(c, positional=False)
    c.add_argument("--start", type=_seconds, default=0.0, metavar="SECONDS",
                   help="start time in the source, seconds, e.g. --start 1.5 (default 0)")
    c.add_argument("--duration", type=_seconds, default=None, metavar="SECONDS",
                   help="seconds to render, e.g. --duration 4 (default: to the end)")
    c.add_argument("--codec", choices=("h264", "ffv1"),
                   help="video codec: h264 (8-bit) or ffv1 (lossless 16-bit), e.g. --codec "
                        "ffv1 (default: by container)")
    c.add_argument("--side-by-side", action="store_true",
                   help="write source | processed side by side (twice the width)")
    _force_arg(c, "OUTPUT")
    c.add_argument("--exact", action="store_true",
                   help="solve every pixel with the DC solver instead of tables (slow)")
    c.add_argument("--control", action="append", metavar="[NAME=]SOURCE",
                   help="drive a live parameter with a control source (volts), e.g. "
                        "knee_current=clip or knee_current=lfo:sine:2Hz:1V (repeatable)")
    _temp_arg(c, "the chain's ambient")
    c.add_argument("--drift", action="store_true",
                   help="junction temperatures follow the chain's [thermal] warm-up over time")
    c.add_argument("--quiet", action="store_true", help="no progress bar")


def _verb_preview(sub):
    c = add_verb(sub, "preview", "live window with monitors (or --snapshot without one)", """
        livecurve preview clips/demo.mp4 --chain configs/night_knee.toml
        livecurve preview clips/demo.mp4 --chain configs/night_knee.toml --snapshot shot.png \\
            --at 2.5
        """, cmd_preview)
    c.add_argument("source", help="clip, still, image sequence or camera:N, "
                                  "e.g. clips/demo.mp4")
    _chain_arg(c, positional=False)
    c.add_argument("--snapshot", metavar="OUT.png",
                   help="write the picture and monitors to a PNG and exit, e.g. shot.png")
    c.add_argument("--at", type=_seconds, default=None, metavar="SECONDS",
                   help="time of the snapshot in the source, seconds, e.g. --at 2.5")
    c.add_argument("--control", action="append", metavar="[NAME=]SOURCE",
                   help="drive a live parameter, e.g. knee_current=device:USB or "
                        "knee_current=lfo:sine:0.5Hz:0.8V (repeatable)")
    c.add_argument("--exact", action="store_true",
                   help="solve every pixel with the DC solver instead of tables (slow)")
    c.add_argument("--monitors", metavar="LIST",
                   help="which monitors to show, comma-separated from waveform, vectorscope, "
                        "transfer, alarms, e.g. --monitors waveform,vectorscope")
    c.add_argument("--max-frames", type=_int_in(1, 10**9, "--max-frames"), default=None,
                   metavar="N", help="stop after this many frames, e.g. --max-frames 300")
    _force_arg(c, "the --snapshot file")
    c.add_argument("--drift", action="store_true",
                   help="junction temperatures follow the chain's [thermal] warm-up")
    c.add_argument("--speedup", type=_positive, default=None, metavar="FACTOR",
                   help="thermal time runs this many times faster than the clip (with "
                        "--drift), e.g. --speedup 60")


def _verb_devices(sub):
    add_verb(sub, "devices", "list audio inputs for --control device:...",
             "livecurve devices", cmd_devices)


def _verb_drift(sub):
    c = add_verb(sub, "drift", "curves and a reference frame over temperature", """
        livecurve drift configs/night_knee.toml --from 0C --to 50C --out drift/
        livecurve drift configs/night_knee.toml --steps 11 --frame still.png --out hot/
        """, cmd_drift)
    _chain_arg(c)
    c.add_argument("--from", dest="from_t", default="0C", metavar="TEMP",
                   help="coldest junction temperature, -55…150 °C, e.g. --from -20C "
                        "(default 0C)")
    c.add_argument("--to", dest="to_t", default="50C", metavar="TEMP",
                   help="hottest junction temperature, -55…150 °C, e.g. --to 85C "
                        "(default 50C)")
    c.add_argument("--steps", type=int, default=6, metavar="N",
                   help="number of temperatures, 2…41, e.g. --steps 11 (default 6)")
    c.add_argument("--frame", metavar="STILL",
                   help="a still to use as the reference frame, e.g. --frame still.png "
                        "(default: drawn colour bars and ramps)")
    c.add_argument("--out", default="drift", metavar="FOLDER",
                   help="folder for drift.csv, drift.png and drift_strip.png, e.g. --out "
                        "drift/ (default drift)")
    _force_arg(c, "those files")


def _verb_spread(sub):
    c = add_verb(sub, "spread", "Monte Carlo over component tolerances", """
        livecurve spread configs/shadow_crush.toml --trials 200 --seed 1 --out spread/
        """, cmd_spread)
    _chain_arg(c)
    c.add_argument("--trials", type=_int_in(1, 1_000_000, "--trials"), default=200,
                   metavar="N", help="random builds of the chain, e.g. --trials 500 "
                                     "(default 200)")
    c.add_argument("--seed", type=_int_in(0, 2**63 - 1, "--seed"), default=0, metavar="N",
                   help="random seed (same seed, same builds), e.g. --seed 1 (default 0)")
    c.add_argument("--out", default="spread", metavar="FOLDER",
                   help="folder for spread.csv, spread.json and spread.png, e.g. --out "
                        "spread/ (default spread)")
    c.add_argument("--quiet", action="store_true", help="no progress bar")
    c.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                   help="run the trials on this Dask scheduler, e.g. --scheduler "
                        "tcp://127.0.0.1:8786 (default $LIVECURVE_SCHEDULER; a local cluster "
                        "from 20000 trials)")
    _force_arg(c, "those files")


def _verb_batch(sub):
    """The ``batch`` verb (see livecurve.outputs.batch and docs/batch.md)."""
    c = add_verb(sub, "batch", "render every source through every chain and setting, on Dask "
                 "(a local cluster or --scheduler)", """
        livecurve batch --chain configs/night_knee.toml --chain configs/film_shoulder.toml \\
            --source clips/demo.mp4 --set knee_current=50uA,120uA --out variants/
        livecurve batch --chain configs/shadow_crush.toml --source clips/demo.mp4 \\
            --temp-c 0,25,50 --codec ffv1 --scheduler tcp://127.0.0.1:8786 --out hot/
        """, cmd_batch)
    c.add_argument("--chain", action="append", required=True, metavar="CHAIN.toml",
                   help="a chain file (repeat for more), e.g. --chain configs/night_knee.toml")
    c.add_argument("--source", action="append", required=True, metavar="CLIP_OR_STILL",
                   help="a clip, still, image sequence or pattern:NAME (repeat for more), "
                        "e.g. --source clips/demo.mp4")
    c.add_argument("--set", action="append", metavar="NAME=V1,V2,...",
                   help="values of a live parameter to try, in its unit (repeat for more "
                        "knobs; every combination is rendered), e.g. --set "
                        "knee_current=50uA,120uA")
    c.add_argument("--temp-c", action="append", metavar="T1,T2,...",
                   help="junction temperatures to try, °C, e.g. --temp-c 0,25,50 (default: "
                        "each chain's ambient)")
    c.add_argument("--codec", choices=("h264", "ffv1"), default="h264",
                   help="clip outputs: h264 (.mp4, default) or lossless ffv1 (.mkv)")
    c.add_argument("--out", required=True, metavar="DIR",
                   help="output folder, on a path every worker sees, e.g. --out variants/")
    c.add_argument("--force", action="store_true",
                   help="render again items whose output already exists (default: a rerun "
                        "skips complete items)")
    c.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                   help="an existing Dask scheduler, e.g. --scheduler tcp://127.0.0.1:8786 "
                        "(default $LIVECURVE_SCHEDULER, else a local cluster in this process)")
    c.add_argument("--workers", type=_int_in(1, 256, "--workers"), default=None, metavar="N",
                   help="local cluster: worker processes, e.g. --workers 2 (default one per "
                        "core)")
    c.add_argument("--segment-s", type=_positive, default=None, metavar="SECONDS",
                   help="clips longer than this are split into segments rendered in "
                        "parallel, seconds, e.g. --segment-s 10 (default 30)")
    c.add_argument("--quiet", action="store_true", help="no progress lines")


def _verb_demo(sub):
    c = add_verb(sub, "demo", "render the built-in demo clip through the demo chains", """
        livecurve demo --out livecurve-demo
        livecurve demo --quick --out /tmp/first-look
        """, cmd_demo)
    c.add_argument("--out", default="livecurve-demo", metavar="FOLDER",
                   help="folder for the results, e.g. --out livecurve-demo "
                        "(default livecurve-demo)")
    _force_arg(c, "files of the same names in FOLDER")
    c.add_argument("--quick", action="store_true", help="one chain, two seconds")


def _verb_measure(sub):
    c = add_verb(sub, "measure", "test signals through a chain: response, pulse, linearity, "
                 "timing and levels per channel", """
        livecurve measure configs/night_knee.toml
        livecurve measure configs/film_shoulder.toml --json m.json --png m.png --temp-c 40
        livecurve measure configs/night_knee.toml --sweep knee_current=50uA:200uA:5 --png k.png
        """, cmd_measure)
    _chain_arg(c)
    c.add_argument("--format", metavar="FORMAT",
                   help="video format whose pixel clock and bandwidth the signals use, "
                        "e.g. --format 720p60 (default: the chain's, else 1080p30)")
    _temp_arg(c, "the chain's ambient")
    _set_arg(c)
    c.add_argument("--json", metavar="OUT.json",
                   help="write the report as JSON (a 'channels' list), e.g. --json m.json")
    c.add_argument("--png", metavar="OUT.png",
                   help="write a sheet of plots; .png, .svg or .pdf, e.g. --png m.png")
    c.add_argument("--sweep", metavar="NAME=FROM:TO:STEPS",
                   help="measure at STEPS values of a live parameter over FROM…TO (in its "
                        "unit), e.g. --sweep knee_current=50uA:200uA:5")
    _force_arg(c, "the JSON/PNG")


#: Functions that add one verb each to the sub-command set, in the order ``--help`` lists them.
VERBS = [_verb_check, _verb_curve, _verb_export, _verb_render, _verb_preview, _verb_devices,
         _verb_drift, _verb_spread, _verb_measure, _verb_batch,
         _verb_demo]


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="livecurve",
        description="Preview analog video-processing circuits on moving pictures.",
        epilog="run 'livecurve VERB --help' for a verb's arguments and examples.\n"
               "exit status: 0 done, 2 bad input, 3 output not written, 128+N stopped by "
               "signal N",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"livecurve {__version__}")
    sub = p.add_subparsers(dest="verb", required=True, metavar="VERB")
    for add in VERBS:
        add(sub)
    return p


# ---- stop signals ------------------------------------------------------------------------------
_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP")
                      if hasattr(signal, n))
_stopped: list[int] = []


def _on_stop(signum, frame):
    """Stop the run like Ctrl-C: raise in the main thread so every ``finally`` and the atomic
    writers clean up; a second signal while cleaning up is ignored."""
    _stopped.append(signum)
    for s in _STOP_SIGNALS:
        signal.signal(s, signal.SIG_IGN)
    raise Stopped(signum)


def _install_stop_handlers():
    import threading
    if threading.current_thread() is not threading.main_thread():
        return None
    old = {s: signal.getsignal(s) for s in _STOP_SIGNALS}
    for s in _STOP_SIGNALS:
        signal.signal(s, _on_stop)
    return old


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    _stopped.clear()
    old = _install_stop_handlers()
    try:
        rc = int(args.func(args) or 0)
        return 128 + _stopped[0] if _stopped else rc
    except OutputInterrupted as exc:
        print(f"livecurve: {exc}", file=sys.stderr)
        return exc.exit_code
    except LivecurveError as exc:
        print(f"livecurve: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt as exc:
        signum = getattr(exc, "signum", _stopped[0] if _stopped else signal.SIGINT)
        print(f"livecurve: interrupted by {signal.Signals(signum).name}; temporary files "
              "removed", file=sys.stderr)
        return 128 + int(signum)
    finally:
        if old:
            for s, h in old.items():
                signal.signal(s, h)


if __name__ == "__main__":
    sys.exit(main())
