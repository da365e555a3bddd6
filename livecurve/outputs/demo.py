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

from livecurve.errors import LivecurveError, OutputError

ROOT = Path(__file__).resolve().parents[2]
DEMO_CLIP = ROOT / "clips" / "demo.mp4"
DEMO_CHAINS = ("night_knee", "shadow_crush", "film_shoulder")


def demo_clip() -> Path:
    """The demo clip, made by clips/make_demo_clip.py if it is missing."""
    if not DEMO_CLIP.is_file():
        import subprocess
        import sys
        script = ROOT / "clips" / "make_demo_clip.py"
        if not script.is_file():
            raise LivecurveError(f"demo clip {DEMO_CLIP} and its script are missing")
        subprocess.run([sys.executable, str(script)], check=True, cwd=str(ROOT))
    return DEMO_CLIP


def chain_path(name: str) -> Path:
    return ROOT / "configs" / f"{name}.toml"


def run_demo(out_dir, *, force: bool = False, quick: bool = False, say=print) -> list[Path]:
    """Render the demo; returns the files written."""
    from livecurve.config.chainfile import load_chain
    from livecurve.outputs import curves
    from livecurve.outputs.render import render
    out = Path(out_dir)
    if out.exists() and any(out.iterdir()) and not force:
        raise OutputError(f"{out}: folder exists and is not empty; use --force to write into "
                          "it")
    out.mkdir(parents=True, exist_ok=True)
    clip = demo_clip()
    written: list[Path] = []
    chains = DEMO_CHAINS[:1] if quick else DEMO_CHAINS
    duration = 2.0 if quick else None
    for name in chains:
        spec = load_chain(chain_path(name))
        say(f"== {spec.title} ({chain_path(name).name})")
        vin, vout = curves.curves(spec, points=401)
        p = out / f"{name}_curve.csv"
        curves.write_curve_csv(p, vin, vout, force=True)
        _wrote(p, written, say)
        p = out / f"{name}_curve.png"
        curves.write_curve_png(p, vin, vout, spec, force=True)
        _wrote(p, written, say)
        p = out / f"{name}.cir"
        curves.write_spice(p, spec, force=True)
        _wrote(p, written, say)
        clip_out = out / f"{name}.mp4"
        rep = render(spec, str(clip), clip_out, duration_s=duration, side_by_side=True,
                     force=True, progress=os.environ.get("CI") is None)
        _wrote(clip_out, written, say, f"{rep.frames} frames at {rep.fps:.1f} fps, table "
                                       f"bound {rep.table_bound_v * 1e3:.3f} mV")
        if rep.flash:
            say(f"   {rep.flash}")
        still = out / f"{name}_before_after.png"
        _before_after(spec, clip, still)
        _wrote(still, written, say, "labelled halves: before | after")
    say("")
    say(f"Results are in {out}/ (side-by-side clips: source left, processed right).")
    say("Open the live preview with, for example:")
    say(f"  livecurve preview {clip} --chain {chain_path('night_knee')}")
    say(f"  livecurve preview {clip} --chain {chain_path('night_knee')} "
        "--control knee_current=lfo:sine:0.5Hz:0.8V")
    say("Without a display, write the same picture and monitors to a file with --snapshot OUT.png.")
    return written


def _wrote(path: Path, written: list, say, note: str = "") -> None:
    written.append(path)
    say(f"   wrote {path}" + (f" ({note})" if note else ""))


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
