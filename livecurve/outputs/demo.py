"""``livecurve demo``: the built-in demo clip through the demo chains, to a folder.

For each demo chain it writes the DC curves (CSV and figure), the SPICE deck, the
processed clip (source | processed, side by side) and a before/after still under a band
labelling each half, printing every file as it is written, then says how to open the live
preview.  The night-knee chain is driven by the clip's own soundtrack.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from livecurve.errors import LivecurveError

ROOT = Path(__file__).resolve().parents[2]
#: The copies a wheel carries (setup.py); a checkout uses configs/ and clips/ themselves.
PACKED = Path(__file__).resolve().parents[1] / "_demo"
DEMO_CHAINS = ("night_knee", "shadow_crush", "film_shoulder")


def _demo_file(folder: str, name: str) -> Path:
    """*name* in the checkout's *folder*, else the installed package's copy of it."""
    here = ROOT / folder / name
    if here.is_file() or not (PACKED / name).is_file():
        return here
    return PACKED / name


DEMO_CLIP = _demo_file("clips", "demo.mp4")


def demo_clip() -> Path:
    """The demo clip, made by clips/make_demo_clip.py if it is missing."""
    if not DEMO_CLIP.is_file():
        import subprocess
        import sys
        script = _demo_file("clips", "make_demo_clip.py")
        if not script.is_file():
            raise LivecurveError(f"demo clip {DEMO_CLIP} and its script are missing")
        subprocess.run([sys.executable, str(script)], check=True, cwd=str(ROOT))
    return DEMO_CLIP


def chain_path(name: str) -> Path:
    """The demo chain file *name* (``configs/NAME.toml``)."""
    return _demo_file("configs", f"{name}.toml")


def demo_files(quick: bool = False) -> list[str]:
    """Names of the files :func:`run_demo` writes (five per demo chain)."""
    chains = DEMO_CHAINS[:1] if quick else DEMO_CHAINS
    return [f"{n}{tail}" for n in chains for tail in
            ("_curve.csv", "_curve.png", ".cir", ".mp4", "_before_after.png")]


def run_demo(out_dir, *, force: bool = False, quick: bool = False, say=print) -> list[Path]:
    """Render the demo into *out_dir*, all or nothing; returns the files written.

    Every file is made in a temporary folder beside *out_dir* and moved in when all are
    complete; files of the same names already in *out_dir* are refused without *force*.
    """
    from livecurve.config.chainfile import load_chain
    from livecurve.media.atomic import atomic_folder, check_folder_target
    from livecurve.outputs import curves
    from livecurve.outputs.render import render
    out = Path(out_dir)
    names = demo_files(quick)
    check_folder_target(out, names, force=force)
    clip = demo_clip()
    chains = DEMO_CHAINS[:1] if quick else DEMO_CHAINS
    duration = 2.0 if quick else None
    with atomic_folder(out, names, force=force) as tmp:
        for name in chains:
            spec = load_chain(chain_path(name))
            say(f"== {spec.title} ({chain_path(name).name})")
            vin, vout = curves.curves(spec, points=401)
            curves.write_curve_csv(tmp / f"{name}_curve.csv", vin, vout, force=True)
            curves.write_curve_png(tmp / f"{name}_curve.png", vin, vout, spec, force=True)
            curves.write_spice(tmp / f"{name}.cir", spec, force=True)
            rep = render(spec, str(clip), tmp / f"{name}.mp4", duration_s=duration,
                         side_by_side=True, force=True,
                         progress=os.environ.get("CI") is None)
            say(f"   {out / (name + '.mp4')}: {rep.frames} frames at {rep.fps:.1f} fps "
                f"(table bound {rep.table_bound_v * 1e3:.3f} mV)")
            if rep.flash:
                say(f"   {rep.flash}")
            _before_after(spec, clip, tmp / f"{name}_before_after.png")
    written = [out / n for n in names]
    say("")
    for p in written:
        say(f"wrote {p}")
    say(f"Results are in {out}/ (side-by-side clips: source left, processed right).")
    say("Open the live preview with, for example:")
    say(f"  livecurve preview {clip} --chain {chain_path('night_knee')}")
    say(f"  livecurve preview {clip} --chain {chain_path('night_knee')} "
        "--control knee_current=lfo:sine:0.5Hz:0.8V")
    say("Without a display, write the same picture and monitors to a file with --snapshot OUT.png.")
    return written


#: Height of the label band above the before/after still, pixels.
LABEL_BAND_PX = 48


def label_band(width: int, labels, *, height: int = LABEL_BAND_PX) -> np.ndarray:
    """A dark band (H, W, 3) uint16 with *labels* written centred over equal parts of it."""
    import cv2
    band = np.full((height, width, 3), 0x1C, dtype=np.uint8)  # OpenCV draws text in 8 bits
    part = width // len(labels)
    font, scale, thick = cv2.FONT_HERSHEY_SIMPLEX, max(0.5, height / 48), 2
    for i, text in enumerate(labels):
        (tw, th), _ = cv2.getTextSize(text, font, scale, thick)
        x = i * part + max(4, (part - tw) // 2)
        cv2.putText(band, text, (x, (height + th) // 2), font, scale, (0xE8,) * 3, thick,
                    cv2.LINE_AA)
    return band.astype(np.uint16) * 257


def _before_after(spec, clip: Path, path: Path, *, at_s: float = 2.0) -> None:
    """A 16-bit PNG: the frame at *at_s* before (left) and after (right) the chain, under
    a band labelling each half.  The pictures themselves are untouched."""
    from livecurve.engine.frameflow import FrameFlow, bind_controls
    from livecurve.media.atomic import write_still
    from livecurve.media.source import open_source
    with open_source(str(clip), start_s=at_s, duration_s=1.0) as src:
        fr = next(iter(src))
        info = src.info
    flow = FrameFlow(spec, width=info.width, height=info.height, fps=info.fps,
                     clip_matrix=info.colour_matrix,
                     controls=bind_controls(spec, [], clip_path=str(clip)),
                     out_dtype=np.uint16)
    after = flow.process(fr.rgb, fr.index)
    before = fr.rgb.astype(np.uint16) * 257
    pair = np.concatenate([before, after], axis=1)
    band = label_band(pair.shape[1], [f"before: source at {at_s:g} s",
                                      f"after: {spec.title}"])
    write_still(path, np.concatenate([band, pair], axis=0), force=True)
