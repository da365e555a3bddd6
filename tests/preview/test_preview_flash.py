"""Flash warnings in the preview, and thermal drift in the frame flow.

Flash criterion: more than 3 flashes in any one second is a hazard (ITU-R BT.1702; from
memory, see REFERENCES.md).  Warm-up: T(t) = T0 + (T1 − T0)(1 − exp(−t/τ)) (first-order
thermal model, livecurve.circuit.thermal) and the ≈ −2 mV/K junction drift at fixed current
(common practice; Sedra & Smith) that an uncompensated log stage shows.
"""

from __future__ import annotations

import tomllib

import cv2
import numpy as np
import pytest
import scipy.constants

from livecurve.config.chainfile import parse_chain
from livecurve.engine.frameflow import FrameFlow
from livecurve.media.probe import probe
from livecurve.preview.window import PreviewSession
from tests.preview.test_preview_live_control import ROOT


def _session(tmp_path, control):
    still = tmp_path / "grey.png"
    cv2.imwrite(str(still), np.full((90, 160, 3), 128, np.uint8))
    return PreviewSession(ROOT / "configs" / "night_knee.toml", probe(str(still)),
                          controls=[control]), np.full((90, 160, 3), 128, np.uint8)


def test_fast_modulation_is_flagged(tmp_path, capsys):
    s, rgb = _session(tmp_path, "knee_current=lfo:square:10Hz:1V")
    for k in range(45):  # 1.5 s at 30 fps
        s.render(rgb, k)
    assert "FLASH HAZARD" in s.note
    assert "epilepsy" in capsys.readouterr().err


def test_slow_modulation_is_not_flagged(tmp_path, capsys):
    s, rgb = _session(tmp_path, "knee_current=lfo:sine:0.2Hz:0.3V")
    for k in range(45):
        s.render(rgb, k)
    assert "FLASH" not in s.note
    assert "FLASH" not in capsys.readouterr().err


def test_drift_follows_the_warm_up(tmp_path):
    raw = tomllib.loads((ROOT / "configs" / "night_knee.toml").read_text())
    raw.pop("control")
    raw["ambient"] = "20C"
    raw["thermal"] = {"warmup_to": "45C", "tau": "2s"}
    spec = parse_chain(raw, path=str(tmp_path / "warm.toml"))
    rgb = np.full((36, 64, 3), 128, np.uint8)
    flow = FrameFlow(spec, width=64, height=36, fps=30, drift=True)
    cold = flow.process(rgb, 0).copy()
    y_cold = float(flow.planes_out[0].mean())
    t_cold = flow.engine.state.t_kelvin
    warm = flow.process(rgb, 300).copy()  # 10 s = 5 τ: within 1 % of 45 °C
    y_warm = float(flow.planes_out[0].mean())
    t_warm = flow.engine.state.t_kelvin
    assert abs(t_cold - 293.15) < 0.3
    assert abs(t_warm - (293.15 + 25 * (1 - np.exp(-5)))) < 0.3
    # The restore stage multiplies the log stage's VBE change by its gain of −20: predicted
    # without livecurve's code from VBE = VT·ln(IC/IS(T)), VT = kT/q with CODATA
    # (scipy.constants) and the SPICE Gummel–Poon law IS(T) = IS·exp[(T/Tnom − 1)·EG/VT +
    # XTI·ln(T/Tnom)] (ngspice manual; REFERENCES.md), IS = 2e-16 A (night_knee.toml),
    # EG = 1.11 eV, XTI = 3, Tnom = 27 °C; IC = Vin/10 kΩ + 60 µA at the frame's input.
    vin = float(flow.planes_in[0].mean())
    i_c = vin / 10e3 + 60e-6

    def vbe(t):
        v_t = scipy.constants.k * t / scipy.constants.e
        return v_t * np.log(i_c / (2e-16 * np.exp((t / 300.15 - 1) * 1.11 / v_t
                                                  + 3 * np.log(t / 300.15))))

    predicted = 20 * (vbe(t_warm) - vbe(t_cold))  # ≈ −0.836 V over the 24.8 K warm-up
    # measured |drop/predicted − 1| = 1.1e-4 (the restore stage's finite loop gain, tables
    # and float32 pixels); held at 5e-4
    assert y_warm - y_cold == pytest.approx(predicted, rel=5e-4)
    assert not np.array_equal(cold, warm)
    # without drift the same frames are identical
    still = FrameFlow(spec, width=64, height=36, fps=30)
    assert np.array_equal(still.process(rgb, 0), still.process(rgb, 300))


def _grey_clip(path, n=75):
    import subprocess

    from livecurve.media import _ffmpeg
    y = np.full((90, 160), 126, np.uint8).tobytes()
    c = np.full((45, 80), 128, np.uint8).tobytes()
    subprocess.run([_ffmpeg.ffmpeg_exe(), "-hide_banner", "-v", "error", "-y", "-f", "rawvideo",
                    "-pix_fmt", "yuv420p", "-s", "160x90", "-r", "30", "-i", "pipe:0",
                    "-c:v", "libx264", "-crf", "10", "-colorspace", "bt709", "-color_range",
                    "tv", str(path)], input=(y + c + c) * n, check=True)
    return path


def test_preview_with_dropped_frames_gives_the_render_verdict(tmp_path):
    # a 2 Hz square modulation: 2 flashes a second, under the limit of 3 (ITU-R BT.1702,
    # from memory).  Squeezing every second frame out of the timeline would double it.
    from livecurve.config.chainfile import load_chain
    from livecurve.media.planes import PlaneClipSource
    from livecurve.outputs.render import render
    clip = _grey_clip(tmp_path / "grey.mp4")
    control = "knee_current=lfo:square:2Hz:1V"
    rep = render(load_chain(ROOT / "configs" / "night_knee.toml"), str(clip),
                 str(tmp_path / "out.mp4"), controls=[control], progress=False)
    assert rep.flash is not None and rep.flash.startswith("flash check: ok")
    s = PreviewSession(ROOT / "configs" / "night_knee.toml", probe(str(clip)),
                       controls=[control])
    seen = []
    push = s._flash.push
    s._flash.push = lambda planes, index=None: seen.append(planes.copy()) or push(
        planes, index=index)
    with PlaneClipSource(s.info) as src:
        shown = [fr for fr in src if fr.index % 2 == 0]         # half the frames dropped
    for fr in shown:
        s.render_planes(fr, fr.index, frame=fr.index)
    assert s._flash.report().verdict == "ok"
    # the same pictures taken as consecutive frames (what the meter did before it was fed
    # the source's frame numbers) read twice as many flashes a second
    from livecurve.monitors.flash import FlashMeter
    old = FlashMeter(30.0, space="ypbpr", standard="bt709")
    for planes in seen:
        old.push(planes)
    assert old.report().verdict == "hazard"
