"""The preview's machinery without a window: clock, decoder thread, rebuilds, composite,
snapshots and the display check."""

from __future__ import annotations

import os
import subprocess
import threading
import time
from pathlib import Path

import cv2
import numpy as np
import pytest

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import load_chain
from livecurve.engine.pipeline import FrameEngine
from livecurve.errors import ConfigError, LivecurveError, MediaError, OutputError
from livecurve.media.probe import probe
from livecurve.media.source import Frame
from livecurve.monitors.alarms import MASK_CLIPPED, MASK_OUTSIDE_LEGAL, zebra_mask
from livecurve.monitors.draw import ZEBRA
from livecurve.preview.keys import Rebuilder, engine_with
from livecurve.preview.overlay import (
    CANVAS_H,
    CANVAS_W,
    GAP,
    PIC_H,
    PIC_W,
    TILE_H,
    TILE_W,
    check_monitors,
    dc_curves,
)
from livecurve.preview.window import (
    FramePump,
    PlayClock,
    PreviewSession,
    display_problem,
    run_preview,
    set_qt_font_dir,
)
from livecurve.signal.levels import converter_is_exact, converter_limits_v
from tests.preview.test_preview_support import (
    BARS,
    REPO,
    bar_centres_in_canvas,
    bars_rgb,
    make_clip,
    runner_cmd,
    write_bars,
    write_chain,
)

FPS = 30.0
#: Volts: float32 rounding of table values and inputs (~6e-8 relative at 0.5 V), with margin.
F32_V = 2e-6


# ---- clock -------------------------------------------------------------------------------------
def test_clock_due_and_late():
    c = PlayClock(FPS, 10.0)
    assert c.due(0) == 10.0 and c.due(30) == pytest.approx(11.0, abs=1e-12)  # i / fps
    p = 1 / FPS
    assert not c.late(3, 10.0 + 3 * p + 0.9 * p)   # less than one period overdue
    assert c.late(3, 10.0 + 3 * p + 1.1 * p)       # more than one period overdue


def test_clock_pause_and_resume():
    c = PlayClock(FPS, 0.0)
    c.pause(1.0)
    assert not c.late(0, 100.0)                    # nothing is late while paused
    c.resume(50.0, 7)
    assert c.due(7) == pytest.approx(50.0) and c.due(8) == pytest.approx(50.0 + 1 / FPS)
    assert not PlayClock(FPS, 0.0, paced=False).late(0, 1e9)


# ---- decoder thread ---------------------------------------------------------------------------
class FakeSource:
    """Frames of a tiny picture; lap 1 starts after *per_lap* frames; optional failure."""

    def __init__(self, per_lap=1000, fail_after=None):
        self.per_lap, self.fail_after, self.n = per_lap, fail_after, 0
        self.rgb = np.zeros((2, 2, 3), np.uint8)

    def __next__(self):
        if self.fail_after is not None and self.n >= self.fail_after:
            raise MediaError("fake: decoding failed")
        i = self.n % self.per_lap
        fr = Frame(i, i / FPS, self.rgb, self.n // self.per_lap)
        self.n += 1
        return fr


def _until(pred, timeout=10.0):
    t = time.monotonic() + timeout
    while time.monotonic() < t:
        if pred():
            return True
        time.sleep(0.005)
    return False


def test_pump_keeps_every_frame_when_the_window_keeps_up():
    now = [0.0]
    pump = FramePump(FakeSource(), PlayClock(FPS, 0.0), clock_fn=lambda: now[0])
    try:
        for k in range(40):
            now[0] = k / FPS
            seq, fr = pump.take(now[0], wait_s=2.0)
            assert seq == k and fr.index == k
        assert pump.dropped == 0
    finally:
        pump.close()


def test_pump_drops_frames_when_the_window_falls_behind():
    now = [0.0]
    clock = PlayClock(FPS, 0.0)
    pump = FramePump(FakeSource(), clock, capacity=2, clock_fn=lambda: now[0])
    try:
        assert pump.take(0.0, wait_s=2.0)[0] == 0
        now[0] = 20.5 / FPS   # the window was busy for 20.5 frame periods
        # frames up to 19 are more than a period overdue; the buffer settles on 20, 21
        assert _until(lambda: pump.buffered() == [20, 21]), pump.buffered()
        seq, _ = pump.take(now[0])
        assert seq == 20
        assert pump.dropped == 19          # frames 1 … 19 were decoded and never shown
    finally:
        pump.close()


def test_pump_stops_at_the_end_of_a_pass_without_loop_and_restarts():
    pump = FramePump(FakeSource(per_lap=5), PlayClock(FPS, 0.0, paced=False), loop=False)
    try:
        got = [pump.take(0.0, wait_s=2.0)[1] for _ in range(5)]
        assert [f.index for f in got] == [0, 1, 2, 3, 4] and all(f.lap == 0 for f in got)
        assert _until(lambda: pump.exhausted)
        assert pump.take(0.0) is None and pump.error is None
        pump.restart()
        seq, fr = pump.take(0.0, wait_s=2.0)
        assert (fr.index, fr.lap, seq) == (0, 1, 5)
    finally:
        pump.close()


def test_pump_hands_a_decoder_error_to_the_window():
    pump = FramePump(FakeSource(fail_after=3), PlayClock(FPS, 0.0, paced=False))
    try:
        assert [pump.take(0.0, wait_s=2.0)[0] for _ in range(3)] == [0, 1, 2]
        assert _until(lambda: pump.exhausted)
        assert isinstance(pump.error, MediaError)
    finally:
        pump.close()


# ---- engines and reloads off the window thread -------------------------------------------
@pytest.fixture
def chain(tmp_path):
    return write_chain(tmp_path / "chain.toml")


def _ramp_planes(w=64):
    ramp = np.linspace(-0.4, 0.4, w, dtype=np.float32)
    return np.ascontiguousarray(np.broadcast_to(ramp, (3, 4, w)))


def test_engine_copy_turns_a_knob_without_touching_the_original(chain):
    spec = load_chain(chain)
    e0 = FrameEngine(spec)
    before = e0.process(_ramp_planes())
    e1 = engine_with(e0, {"gain_r": 10e3})
    assert e0.state.live["gain_r"] == 2e3 and e1.state.live["gain_r"] == 10e3
    np.testing.assert_array_equal(e0.process(_ramp_planes()), before)
    fresh = FrameEngine(spec, live={"gain_r": 10e3})
    np.testing.assert_array_equal(e1.process(_ramp_planes()), fresh.process(_ramp_planes()))
    assert not np.allclose(e1.process(_ramp_planes()), before)


def test_rebuilder_turns_knobs_and_reloads(chain, tmp_path):
    info = probe(write_bars(tmp_path / "bars.png"))
    s = PreviewSession(chain, info)
    rb = Rebuilder(s.build_flow, s.flow.engine)
    try:
        rb.want_knobs({"gain_r": 5e3})
        kind, eng, err = rb.results.get(timeout=30)
        assert (kind, err) == ("knobs", None) and eng.state.live["gain_r"] == 5e3
        assert s.flow.engine.state.live["gain_r"] == 2e3     # the window's engine untouched
        write_chain(chain, "4k")
        rb.want_reload({})
        kind, flow, err = rb.results.get(timeout=30)
        assert (kind, err) == ("reload", None)
        assert flow.engine.state.live["gain_r"] == 4e3       # the file's new value
        chain.write_text("title = 'broken\n", encoding="utf-8")
        rb.want_reload({"gain_r": 7e3})
        kind, flow, err = rb.results.get(timeout=30)
        assert kind == "reload" and flow is None
        assert str(chain) in err and "TOML" in err
        # the knob the user turned still reaches the chain in use
        kind, eng, err = rb.results.get(timeout=30)
        assert (kind, err) == ("knobs", None) and eng.state.live["gain_r"] == 7e3
    finally:
        rb.close()


def test_reload_keeps_the_knobs_the_user_set(chain, tmp_path):
    info = probe(write_bars(tmp_path / "bars.png"))
    s = PreviewSession(chain, info)
    s.turn(50)
    turned = s.wanted["gain_r"]
    write_chain(chain, "3k")
    assert s.build_flow(s.carry()).engine.state.live["gain_r"] == turned
    s.reset_knobs()
    assert s.build_flow(s.carry()).engine.state.live["gain_r"] == 3e3


@pytest.mark.parametrize("cfg", ["film_shoulder", "night_knee", "shadow_crush"])
def test_transfer_curve_is_the_chains_dc_transfer(cfg):
    """The transfer view's curve equals the DC solver's (tables within their measured bound)
    and the engine's output on flat fields, after the line filters have settled."""
    spec = load_chain(REPO / "configs" / f"{cfg}.toml")
    eng = FrameEngine(spec, lead_in_samples=64)
    vin = np.linspace(spec.sweep_v[0], spec.sweep_v[1], 41)
    curve = dc_curves(eng, vin)
    solver = ChainModel(spec).transfer_all(vin, live=eng.state.live)
    assert np.max(np.abs(curve - solver)) <= eng.worst_table_err_v + F32_V
    flat = np.ascontiguousarray(np.broadcast_to(vin.astype(np.float32)[None, :, None],
                                                (3, vin.size, 600)))
    out = eng.process(flat)
    np.testing.assert_allclose(out[:, :, -1], curve, atol=1e-4)


# ---- the composite ----------------------------------------------------------------------------
@pytest.fixture
def session(chain, tmp_path):
    info = probe(write_bars(tmp_path / "bars.png"))
    return PreviewSession(chain, info)


def _bars_in(canvas):
    row, cols = bar_centres_in_canvas()
    return np.array([canvas[row, c] for c in cols])  # BGR


def test_composite_size_and_bypass_shows_the_source_codes(session):
    # BT.709 8-bit codes → 10-bit legal converter → 8-bit codes is exact for R′G′B′
    # (livecurve.signal.levels.converter_is_exact: half a 10-bit code is 0.15 of an 8-bit one)
    assert converter_is_exact(8, space="rgb", standard="bt709", converter_bits=10)
    session.flow.bypass = True
    canvas = session.render(bars_rgb(), 0)
    assert canvas.shape == (CANVAS_H, CANVAS_W, 3) and canvas.dtype == np.uint8
    # OpenCV images are B′G′R′ (OpenCV imshow/imwrite documentation): red is the last byte
    np.testing.assert_array_equal(_bars_in(canvas), np.array(BARS)[:, ::-1])


def test_processed_picture_shows_the_chain(session):
    canvas = session.render(bars_rgb(), 0).copy()
    shown = _bars_in(canvas)[:, 2].astype(int)            # R′ of each bar
    expect = session.flow.rgb_out[90, [27 + 55 * i for i in range(len(BARS))], 0]
    np.testing.assert_array_equal(shown, expect)
    assert shown[1] < 64 and shown[3] > 192                # gain > 1 about mid-grey


def test_split_view_left_source_right_processed(session):
    proc = _bars_in(session.render(bars_rgb(), 0).copy())
    session.view.split = True
    split = _bars_in(session.render(bars_rgb(), 0))
    src = np.array(BARS)[:, ::-1]
    np.testing.assert_array_equal(split[:2], src[:2])     # bars left of the middle
    np.testing.assert_array_equal(split[4:], proc[4:])    # bars right of the middle
    assert not np.array_equal(split[1], proc[1])


def test_zebra_marks_exactly_the_alarmed_bars(session):
    rgb = bars_rgb()
    plain = session.render(rgb, 0).copy()
    session.view.zebra = True
    zeb = session.render(rgb, 0)
    spec = session.spec
    lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                             converter_legal=spec.converter_legal)
    full = zebra_mask(session.flow.planes_out, space=spec.space, converter_limits_v=lim,
                      striped=False)
    codes = full[90, [27 + 55 * i for i in range(len(BARS))]]
    assert MASK_CLIPPED in codes and MASK_OUTSIDE_LEGAL in codes and 0 in codes
    row, cols = bar_centres_in_canvas()
    for code, c in zip(codes, cols, strict=True):
        band = zeb[row - 20:row + 20, c - 20:c + 20].reshape(-1, 3)
        for k, colour in ZEBRA.items():
            hits = np.all(band == colour, axis=1).sum()
            assert (hits > 0) == (k == code), (code, k, hits)
        if code == 0:
            np.testing.assert_array_equal(band, plain[row - 20:row + 20,
                                                      c - 20:c + 20].reshape(-1, 3))


def _slot(canvas, i):
    if i < 2:
        y, x = i * (TILE_H + GAP), PIC_W + GAP
    else:
        y, x = PIC_H + GAP, (i - 2) * (TILE_W + GAP)
    return canvas[y:y + TILE_H, x:x + TILE_W]


def test_monitor_choice_fills_the_slots(chain, tmp_path):
    info = probe(write_bars(tmp_path / "bars.png"))
    everything = PreviewSession(chain, info).render(bars_rgb(), 0)
    assert all(_slot(everything, i).std() > 5 for i in range(5))
    only = PreviewSession(chain, info, monitors=["vectorscope"]).render(bars_rgb(), 0)
    assert _slot(only, 0).std() > 5 and _slot(only, 1).std() > 5   # scope, status
    assert all(np.all(_slot(only, i) == 8) for i in (2, 3, 4))      # empty slots


def test_scopes_read_every_other_line_above_720p(chain, tmp_path):
    """A 1080-line picture made of 2 × 2 blocks gives the same scope pictures whether the
    scopes read every sample or every 2nd line and sample (their drawing is normalised)."""
    rng = np.random.default_rng(7)
    small = rng.integers(0, 256, (540, 960, 3), dtype=np.uint8)
    big = np.ascontiguousarray(np.repeat(np.repeat(small, 2, axis=0), 2, axis=1))
    path = tmp_path / "big.png"
    cv2.imwrite(str(path), big[:, :, ::-1])
    info = probe(path)
    auto = PreviewSession(chain, info)
    full = PreviewSession(chain, info, scope_step=1)
    assert auto.composer.step_for(1080, 1920) == 2 and auto.composer.step_for(720, 1280) == 1
    a, f = auto.render(big, 0).copy(), full.render(big, 0)
    for slot in range(4):   # waveform, vectorscope, transfer, alarms
        np.testing.assert_array_equal(_slot(a, slot), _slot(f, slot))
    with pytest.raises(ConfigError, match="scope_step"):
        PreviewSession(chain, info, scope_step=0)


def test_monitor_names_are_checked():
    assert check_monitors(None) == ("waveform", "vectorscope", "transfer", "alarms")
    assert check_monitors("alarms,waveform") == ("waveform", "alarms")
    with pytest.raises(ConfigError, match="waveform, vectorscope"):
        check_monitors(["histogram"])


def test_driven_knob_is_not_turned_by_keys():
    spec_path = REPO / "configs" / "night_knee.toml"
    s = PreviewSession(spec_path, probe(REPO / "clips" / "demo.mp4"))
    assert s.driven_by("knee_current") == "beat"
    assert s.turn(50) is None and "beat" in s.note
    s.selected = 1
    assert s.turn(50) == "black_trim"


# ---- snapshots -------------------------------------------------------------------------------
def test_snapshot_writes_the_composite(chain, tmp_path, capsys):
    still = write_bars(tmp_path / "bars.png")
    out = tmp_path / "snap.png"
    assert run_preview(chain, str(still), snapshot=str(out)) == 0
    img = cv2.imread(str(out), cv2.IMREAD_UNCHANGED)
    assert img.shape == (CANVAS_H, CANVAS_W, 3) and img.dtype == np.uint8
    assert img.std() > 10                                   # not blank
    ref = PreviewSession(chain, probe(still))
    np.testing.assert_array_equal(img, ref.render(bars_rgb(), 0, frame=0, time_s=0.0,
                                                  paused=True))
    assert '"event": "snapshot"' in capsys.readouterr().out
    assert not [p for p in tmp_path.iterdir() if ".partial" in p.name]
    with pytest.raises(OutputError, match="exists"):
        run_preview(chain, str(still), snapshot=str(out))
    with pytest.raises(OutputError, match=".png"):
        run_preview(chain, str(still), snapshot=str(tmp_path / "snap.jpg"))


def test_snapshot_at_a_time_of_a_clip(chain, tmp_path, capsys):
    clip = make_clip(tmp_path / "clip.mp4", seconds=2.0, fps=25)
    run_preview(chain, str(clip), snapshot=str(tmp_path / "at.png"), at_s=1.0)
    line = [ln for ln in capsys.readouterr().out.splitlines() if "snapshot" in ln][-1]
    assert '"frame": 25' in line                      # frame i at i / fps
    assert cv2.imread(str(tmp_path / "at.png")).shape == (CANVAS_H, CANVAS_W, 3)


def test_bad_options_are_refused(chain, tmp_path):
    still = str(write_bars(tmp_path / "bars.png"))
    with pytest.raises(ConfigError, match="monitor"):
        run_preview(chain, still, snapshot=str(tmp_path / "a.png"), monitors=["scope"])
    with pytest.raises(LivecurveError, match="max-frames"):
        run_preview(chain, still, max_frames=0)
    with pytest.raises(ConfigError, match="not found"):
        run_preview(tmp_path / "none.toml", still, snapshot=str(tmp_path / "b.png"))


# ---- display check ---------------------------------------------------------------------------
def test_display_problems_are_named():
    assert "DISPLAY is not set" in display_problem({})
    assert "XWayland" in display_problem({"WAYLAND_DISPLAY": "wayland-0"})
    assert "offscreen" in display_problem({"DISPLAY": ":0", "QT_QPA_PLATFORM": "offscreen"})
    assert "cannot connect" in display_problem({"DISPLAY": ":987654"})


def test_qt_font_dir_points_at_fonts(monkeypatch, tmp_path):
    monkeypatch.setenv("QT_QPA_FONTDIR", str(tmp_path / "missing"))
    d = set_qt_font_dir()
    assert d is not None and os.environ["QT_QPA_FONTDIR"] == d
    assert any(Path(d).rglob("*.ttf"))        # fonts-dejavu-core (Debian) is installed


def test_no_display_refuses_cleanly(chain, tmp_path):
    """Without a display the preview exits with an error naming --snapshot; no abort."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")}
    still = write_bars(tmp_path / "bars.png")
    r = subprocess.run(runner_cmd(chain_path=str(chain), source=str(still)), env=env,
                       cwd=REPO, capture_output=True, text=True, timeout=120)
    assert r.returncode == 2, r.stderr            # DeviceError's exit code, not a signal
    assert "--snapshot" in r.stderr and "DISPLAY" in r.stderr
    assert "Traceback" not in r.stderr


def test_threads_end_with_the_pump():
    before = threading.active_count()
    pump = FramePump(FakeSource(), PlayClock(FPS, 0.0, paced=False))
    pump.take(0.0, wait_s=2.0)
    pump.close()
    assert _until(lambda: threading.active_count() == before, 5.0)
