"""Command line: argument parsing only; each verb calls one function of the package."""

from __future__ import annotations

import argparse
import sys

from livecurve.errors import LivecurveError


def _chain(path):
    from livecurve.config.chainfile import load_chain
    return load_chain(path)


def _temp(args):
    from livecurve.units import parse_temperature_k
    return None if args.temp_c is None else parse_temperature_k(args.temp_c, key="--temp-c")


def _live(spec, args):
    """Knob values from ``--set NAME=VALUE`` options (checked against the knob's range)."""
    from livecurve.errors import ConfigError
    from livecurve.units import parse_value
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
            raise ConfigError(f"outside {ls.lo:g} … {ls.hi:g}", key=f"--set {name}", value=val)
        out[name] = v
    return out or None


def cmd_check(args) -> int:
    from livecurve.analysis.summary import chain_summary
    from livecurve.engine.pipeline import FrameEngine
    spec = _chain(args.chain)
    eng = FrameEngine(spec)
    print(chain_summary(spec, eng))
    return 0


def cmd_curve(args) -> int:
    from livecurve.outputs import curves
    spec = _chain(args.chain)
    if args.step:
        from livecurve.outputs.steps import write_steps
        write_steps(spec, csv=args.csv, png=args.png, force=True)
        return 0
    if not (args.csv or args.png):
        raise LivecurveError("curve: give --csv OUT.csv and/or --png OUT.png")
    vin, vout = curves.curves(spec, points=args.points, t_kelvin=_temp(args),
                              live=_live(spec, args))
    if args.csv:
        curves.write_curve_csv(args.csv, vin, vout)
        print(f"wrote {args.csv} ({len(vin)} points)")
    if args.png:
        curves.write_curve_png(args.png, vin, vout, spec)
        print(f"wrote {args.png}")
    return 0


def cmd_export(args) -> int:
    spec = _chain(args.chain)
    if not (args.spice or args.clf):
        raise LivecurveError("export: give --spice OUT.cir and/or --clf OUT.clf")
    if args.spice:
        from livecurve.outputs.curves import write_spice
        write_spice(args.spice, spec, t_kelvin=_temp(args), live=_live(spec, args),
                    points=args.points, force=True)
        print(f"wrote {args.spice}")
    if args.clf:
        from livecurve.outputs.clf import write_clf
        write_clf(args.clf, spec, t_kelvin=_temp(args), live=_live(spec, args), force=True)
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


def cmd_drift(args) -> int:
    from pathlib import Path

    from livecurve.analysis.drift import run_drift
    from livecurve.units import parse_temperature_k
    spec = _chain(args.chain)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    rep = run_drift(spec, from_k=parse_temperature_k(args.from_t, key="--from"),
                    to_k=parse_temperature_k(args.to_t, key="--to"), steps=args.steps,
                    csv=out / "drift.csv", png=out / "drift.png",
                    strip_png=out / "drift_strip.png", frame_source=args.frame)
    print("\n".join(rep.lines()))
    return 0


def cmd_spread(args) -> int:
    from pathlib import Path

    from livecurve.analysis.spread import run_spread
    spec = _chain(args.chain)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    rep = run_spread(spec, trials=args.trials, seed=args.seed, csv=out / "spread.csv",
                     json=out / "spread.json", png=out / "spread.png",
                     progress=not args.quiet, scheduler=_spread_scheduler(args))
    print("\n".join(rep.lines()))
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


def _add_batch(sub) -> None:
    """The ``batch`` verb (see livecurve.outputs.batch and docs/batch.md)."""
    c = sub.add_parser("batch", help="render every source through every chain and setting, "
                                     "on Dask (a local cluster or --scheduler)")
    c.add_argument("--chain", action="append", required=True, metavar="CHAIN.toml",
                   help="a chain file (repeat for more)")
    c.add_argument("--source", action="append", required=True, metavar="CLIP_OR_STILL",
                   help="a clip, still or image sequence (repeat for more)")
    c.add_argument("--set", action="append", metavar="NAME=V1,V2,...",
                   help="values of a live parameter to try (repeat for more knobs; every "
                        "combination is rendered)")
    c.add_argument("--temp-c", action="append", metavar="T1,T2,...",
                   help="junction temperatures to try (default: each chain's ambient)")
    c.add_argument("--codec", choices=("h264", "ffv1"), default="h264",
                   help="clip outputs: h264 (.mp4, default) or lossless ffv1 (.mkv)")
    c.add_argument("--out", required=True, metavar="DIR",
                   help="output folder, on a path every worker sees")
    c.add_argument("--force", action="store_true",
                   help="render items whose output already exists")
    c.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                   help="an existing Dask scheduler (default $LIVECURVE_SCHEDULER, else a "
                        "local cluster in this process)")
    c.add_argument("--workers", type=int, default=None,
                   help="local cluster: worker processes (default one per core)")
    c.add_argument("--segment-s", type=float, default=None,
                   help="clips longer than this many seconds are split into segments "
                        "rendered in parallel (default 30)")
    c.add_argument("--quiet", action="store_true", help="no progress lines")
    c.set_defaults(func=cmd_batch)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="livecurve",
        description="Preview analog video-processing circuits on moving pictures.")
    sub = p.add_subparsers(dest="verb", required=True)

    c = sub.add_parser("check", help="validate a chain file and print its summary")
    c.add_argument("chain")
    c.set_defaults(func=cmd_check)

    c = sub.add_parser("curve", help="DC transfer (or step response) of every channel")
    c.add_argument("chain")
    c.add_argument("--csv")
    c.add_argument("--png")
    c.add_argument("--points", type=int, default=501)
    c.add_argument("--temp-c", help="junction temperature, e.g. 40 or 40C (default: ambient)")
    c.add_argument("--set", action="append", metavar="NAME=VALUE",
                   help="set a live parameter, e.g. --set knee=80uA")
    c.add_argument("--step", action="store_true",
                   help="write each channel's step response instead (line-rate dynamics)")
    c.set_defaults(func=cmd_curve)

    c = sub.add_parser("export", help="write a SPICE deck and/or a CLF LUT of the chain")
    c.add_argument("chain")
    c.add_argument("--spice", metavar="OUT.cir")
    c.add_argument("--clf", metavar="OUT.clf")
    c.add_argument("--points", type=int, default=501)
    c.add_argument("--temp-c")
    c.add_argument("--set", action="append", metavar="NAME=VALUE")
    c.set_defaults(func=cmd_export)

    c = sub.add_parser("render", help="put a clip, still, sequence or camera through a chain")
    c.add_argument("source", help="clip file, still, image sequence (shot_%%04d.png) or "
                                  "camera:N")
    c.add_argument("output", help=".mp4/.mov/.mkv for clips, .png/.tif for stills (16-bit)")
    c.add_argument("--chain", required=True)
    c.add_argument("--start", type=float, default=0.0, help="start time, seconds")
    c.add_argument("--duration", type=float, default=None, help="seconds to render")
    c.add_argument("--codec", choices=("h264", "ffv1"))
    c.add_argument("--side-by-side", action="store_true", help="source | processed")
    c.add_argument("--force", action="store_true", help="overwrite OUTPUT")
    c.add_argument("--exact", action="store_true",
                   help="solve every pixel with the DC solver instead of tables (slow)")
    c.add_argument("--control", action="append", metavar="[NAME=]SOURCE",
                   help="drive a live parameter, e.g. knee_current=clip or "
                        "knee_current=lfo:sine:2Hz:1V")
    c.add_argument("--temp-c", help="junction temperature (default: the chain's ambient)")
    c.add_argument("--drift", action="store_true",
                   help="junction temperatures follow the chain's [thermal] warm-up over time")
    c.add_argument("--quiet", action="store_true", help="no progress bar")
    c.set_defaults(func=cmd_render)

    c = sub.add_parser("preview", help="live window with monitors (or --snapshot without one)")
    c.add_argument("source", help="clip, still, image sequence or camera:N")
    c.add_argument("--chain", required=True)
    c.add_argument("--snapshot", metavar="OUT.png", help="write the composite and exit")
    c.add_argument("--at", type=float, default=None, help="time of the snapshot, seconds")
    c.add_argument("--control", action="append", metavar="[NAME=]SOURCE")
    c.add_argument("--exact", action="store_true")
    c.add_argument("--monitors", help="which monitors to show, e.g. waveform,vectorscope "
                                      "(waveform, vectorscope, transfer, alarms)")
    c.add_argument("--max-frames", type=int, default=None, help="stop after this many frames")
    c.add_argument("--force", action="store_true", help="overwrite the --snapshot file")
    c.add_argument("--drift", action="store_true",
                   help="junction temperatures follow the chain's [thermal] warm-up")
    c.add_argument("--speedup", type=float, default=None,
                   help="thermal time runs this many times faster than the clip (with --drift)")
    c.set_defaults(func=cmd_preview)

    c = sub.add_parser("devices", help="list audio inputs for --control device:...")
    c.set_defaults(func=cmd_devices)

    c = sub.add_parser("drift", help="curves and a reference frame over temperature")
    c.add_argument("chain")
    c.add_argument("--from", dest="from_t", default="0C")
    c.add_argument("--to", dest="to_t", default="50C")
    c.add_argument("--steps", type=int, default=6)
    c.add_argument("--frame", help="a still to use as the reference frame")
    c.add_argument("--out", default="drift")
    c.set_defaults(func=cmd_drift)

    c = sub.add_parser("spread", help="Monte Carlo over component tolerances")
    c.add_argument("chain")
    c.add_argument("--trials", type=int, default=200)
    c.add_argument("--seed", type=int, default=0)
    c.add_argument("--out", default="spread")
    c.add_argument("--quiet", action="store_true")
    c.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                   help="run the trials on this Dask scheduler (default $LIVECURVE_SCHEDULER; "
                        "a local cluster from 20000 trials)")
    c.set_defaults(func=cmd_spread)

    _add_batch(sub)

    c = sub.add_parser("demo", help="render the built-in demo clip through the demo chains")
    c.add_argument("--out", default="livecurve-demo", help="folder for the results")
    c.add_argument("--force", action="store_true")
    c.add_argument("--quick", action="store_true", help="one chain, two seconds")
    c.set_defaults(func=cmd_demo)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except LivecurveError as exc:
        print(f"livecurve: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("livecurve: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
