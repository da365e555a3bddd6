"""The window's work made ahead on the decoder thread, and knob turns that wait briefly.

The decoder thread runs the chain, the window's views and the monitors' numbers for the
next frames (``FramePump(prepare=...)``, ``PreviewSession.prepare``) while the window shows
the present one.  What is checked: a frame made ahead draws exactly the composite the
window would have drawn itself; one made before a knob turn, bypass or a reload is made
again; overdue frames are dropped before any work is spent on them; a quick knob build is
waited for, a reload is not.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from livecurve.media.planes import PlaneClipSource
from livecurve.media.probe import probe
from livecurve.outputs.demo import chain_path, demo_clip
from livecurve.preview import keys
from livecurve.preview.keys import Rebuilder, engine_with
from livecurve.preview.window import FramePump, PlayClock, PreviewSession, ReadyFrame
from tests.preview.test_preview_session import FPS, FakeSource, _until

STATUS = dict(frame=0, time_s=0.0, fps_shown=30.0, dropped=0, paused=False, ended=False,
              loop=True, rebuilding=False)


# ---- decoder thread -------------------------------------------------------------------------
def test_pump_prepares_frames_in_order_and_drops_overdue_ones_unprepared():
    now = [0.0]
    made = []

    def prepare(seq, fr):
        made.append(seq)
        return ("made", seq, fr)

    pump = FramePump(FakeSource(), PlayClock(FPS, 0.0), capacity=2,
                     clock_fn=lambda: now[0], prepare=prepare)
    try:
        for k in range(5):
            now[0] = k / FPS
            seq, item = pump.take(now[0], wait_s=2.0)
            assert seq == k and item == ("made", k, item[2]) and item[2].index == k
        # the window is away for 30 frame periods: the frames decoded meanwhile are
        # overdue and are dropped as they come, without being made
        now[0] = 40.0 / FPS
        assert _until(lambda: len(pump.buffered()) == 2 and pump.buffered()[0] >= 39)
        got = pump.buffered()
        assert all(s in made for s in got)
        skipped = [s for s in range(7, got[0]) if s not in made]
        assert len(skipped) >= 25 and pump.dropped >= len(skipped)
    finally:
        pump.close()


# ---- frames made ahead ----------------------------------------------------------------------
@pytest.fixture(scope="module")
def clip_frames():
    info = probe(demo_clip())
    with PlaneClipSource(info, duration_s=0.2) as src:
        frames = [next(src) for _ in range(3)]
    return info, frames


def _session(info, chain="shadow_crush"):
    return PreviewSession(chain_path(chain), info)


def _count_runs(s, monkeypatch):
    calls = []
    real = s._run_chain

    def spy(fr, index):
        calls.append(index)
        return real(fr, index)

    monkeypatch.setattr(s, "_run_chain", spy)
    return calls


@pytest.mark.parametrize("chain", ["shadow_crush", "night_knee"])
def test_a_frame_made_ahead_draws_what_the_window_would_draw(clip_frames, monkeypatch, chain):
    # night_knee: its knee follows the clip's soundtrack, so the controls, the transfer
    # curve at them and the flash estimate are made ahead as well
    import dataclasses
    info, frames = clip_frames
    fr = frames[1]
    own = _session(info, chain)
    want = own.render_planes(fr, fr.index, **STATUS).copy()
    s = _session(info, chain)
    ready = s.prepare(fr.index, fr)
    assert isinstance(ready, ReadyFrame)
    made = {"waveform", "vectorscope", "transfer", "alarms"}
    if chain == "night_knee":
        made.add("flash")
        assert ready.controls and own._flash is not None
    assert set(ready.numbers) == made                          # measured ahead
    calls = _count_runs(s, monkeypatch)
    got = s.render_planes(ready, fr.index, **STATUS)
    assert calls == []                                         # drawn as made, not re-run
    np.testing.assert_array_equal(got, want)
    if chain == "night_knee":
        assert dataclasses.asdict(s._flash.report()) == dataclasses.asdict(own._flash.report())


@pytest.mark.parametrize("change", ["knob", "bypass", "split"])
def test_a_frame_made_before_a_change_is_made_again(clip_frames, monkeypatch, change):
    info, frames = clip_frames
    fr = frames[2]
    s = _session(info)
    ready = s.prepare(fr.index, fr)
    before = s.render_planes(ready, fr.index, **STATUS).copy()
    if change == "knob":
        s.flow.engine = engine_with(s.flow.engine, {"crush_point": s.spec.live["crush_point"].hi})
    elif change == "bypass":
        s.flow.bypass = True
    else:
        s.view.split = True
    calls = _count_runs(s, monkeypatch)
    got = s.render_planes(ready, fr.index, **STATUS).copy()
    assert calls == [fr.index]                                 # the chain ran again
    assert not np.array_equal(got, before)
    # and it is what a window that never made anything ahead draws after the same change
    own = _session(info)
    if change == "knob":
        own.flow.engine = s.flow.engine
    elif change == "bypass":
        own.flow.bypass = True
    else:
        own.view.split = True
    np.testing.assert_array_equal(got, own.render_planes(fr, fr.index, **STATUS))


# ---- knob turns ---------------------------------------------------------------------------
def test_a_quick_knob_build_is_waited_for(clip_frames):
    info, _ = clip_frames
    s = _session(info)
    rb = Rebuilder(s.build_flow, s.flow.engine)
    try:
        assert rb.wait_knobs(0.0)                    # nothing asked: nothing to wait for
        rb.want_knobs({"crush_point": s.spec.live["crush_point"].hi})
        assert rb.wait_knobs(10.0)
        kind, eng, err = rb.results.get_nowait()     # there when the wait ends
        assert (kind, err) == ("knobs", None)
        assert eng.state.live["crush_point"] == s.spec.live["crush_point"].hi
    finally:
        rb.close()


def test_a_slow_knob_build_times_out_and_a_reload_is_not_waited_for(clip_frames, monkeypatch):
    info, _ = clip_frames
    s = _session(info)
    gate = threading.Event()
    real = keys.engine_with

    def slow(engine, live):
        gate.wait(10.0)
        return real(engine, live)

    monkeypatch.setattr(keys, "engine_with", slow)
    rb = Rebuilder(s.build_flow, s.flow.engine)
    try:
        rb.want_knobs({"crush_point": s.spec.live["crush_point"].lo})
        t0 = time.perf_counter()
        assert not rb.wait_knobs(0.05)
        assert time.perf_counter() - t0 < 2.0
        gate.set()
        assert rb.wait_knobs(10.0)
        assert rb.results.get(timeout=10)[0] == "knobs"
        gate.clear()

        def slow_flow(carry):
            gate.wait(10.0)
            return s.build_flow(carry)

        rb2 = Rebuilder(slow_flow, s.flow.engine)
        try:
            rb2.want_reload({})
            assert _until(lambda: rb2.busy)
            t0 = time.perf_counter()
            assert rb2.wait_knobs(5.0)                # a reload is not a knob turn
            assert time.perf_counter() - t0 < 1.0
        finally:
            gate.set()
            rb2.close()
    finally:
        gate.set()
        rb.close()


# ---- how much of the picture the window reads -------------------------------------------
class _Info:
    def __init__(self, w, h, fps):
        self.width, self.height, self.fps = w, h, fps


@pytest.mark.parametrize("w, h, fps, step", [
    (1280, 720, 30.0, 1),      # 27.6 M samples/s: in full
    (1920, 1080, 30.0, 2),     # 62 M/s in full; 960x540 reads 15.6 M/s
    (1280, 720, 60.0, 2),      # 55 M/s in full; 640x360
    (1920, 1080, 60.0, 3),     # 960x540 would be 31 M/s
    (720, 576, 25.0, 1),
    (3840, 2160, 30.0, 3),     # 1280x720 at 30: exactly the budget
])
def test_view_step_keeps_the_samples_read_a_second_within_the_budget(w, h, fps, step):
    from livecurve.preview.window import VIEW_MAX_SAMPLES_PER_S, view_step
    got = view_step(_Info(w, h, fps))
    assert got == step
    rate = lambda s: -(-w // s) * -(-h // s) * fps   # noqa: E731 - samples a second at step s
    assert rate(got) <= VIEW_MAX_SAMPLES_PER_S
    assert got == 1 or rate(got - 1) > VIEW_MAX_SAMPLES_PER_S   # the smallest such step


# ---- monitors of a fast clip ------------------------------------------------------------
def test_a_clip_faster_than_30_fps_redraws_its_monitors_every_other_frame(clip_frames):
    import dataclasses

    from livecurve.preview.overlay import PIC_H, PIC_W
    from tests.preview.test_preview_session import _slot
    info, frames = clip_frames

    def draw(fps):
        s = _session(dataclasses.replace(info, fps=fps))
        return [s.render_planes(fr, fr.index, **STATUS).copy() for fr in frames[:3]], s

    def same_monitors(a, b):
        return all(np.array_equal(_slot(a, i), _slot(b, i)) for i in range(4))

    at60, _ = draw(60.0)
    assert same_monitors(at60[1], at60[0])            # frame 1: monitors kept
    assert not same_monitors(at60[2], at60[1])        # frame 2: redrawn
    for a, b in ((at60[0], at60[1]), (at60[1], at60[2])):
        assert not np.array_equal(a[:PIC_H, :PIC_W], b[:PIC_H, :PIC_W])   # the picture moves
    # a held frame redrawn (a knob, a toggle) always redraws its monitors: frame 1 held
    # shows frame 1's monitors, not the kept ones of frame 0
    s = _session(dataclasses.replace(info, fps=60.0))
    first = s.render_planes(frames[0], frames[0].index, **STATUS).copy()
    kept = s.render_planes(frames[1], frames[1].index, **STATUS).copy()
    held = s.render_planes(frames[1], frames[1].index, new_frame=False, **STATUS)
    assert same_monitors(kept, first) and not same_monitors(held, first)
    at30, _ = draw(30.0)
    assert not same_monitors(at30[1], at30[0])        # 30 frames/s: every frame


# ---- the R′G′B′ path (camera, stills, clips the one-pass kernel does not take) -------------
@pytest.fixture(scope="module")
def rgb_frames():
    from livecurve.media.source import open_source
    with open_source(demo_clip(), duration_s=0.2) as src:
        info = src.info
        frames = [src.read() for _ in range(3)]
    return info, frames


def test_an_rgb_frame_made_ahead_draws_what_the_window_would_draw(rgb_frames, monkeypatch):
    info, frames = rgb_frames
    fr = frames[1]
    own = _session(info, "night_knee")
    want = own.render(fr.rgb, fr.index, **STATUS).copy()
    s = _session(info, "night_knee")
    ready = s.prepare(fr.index, fr)
    assert isinstance(ready, ReadyFrame) and not hasattr(ready, "y")
    assert set(ready.numbers) == {"waveform", "vectorscope", "transfer", "alarms"}
    calls = []
    real = s.flow.process
    monkeypatch.setattr(s.flow, "process", lambda *a: calls.append(a[1]) or real(*a))
    got = s.render(ready, fr.index, **STATUS).copy()
    assert calls == []                                         # drawn as made
    np.testing.assert_array_equal(got, want)
    # a knob turn: made again, as a window that never made anything ahead draws it
    s.flow.engine = own.flow.engine = engine_with(s.flow.engine, {"black_trim": 0.94})
    again = s.render(ready, fr.index, **STATUS)
    assert calls == [fr.index]
    np.testing.assert_array_equal(again, own.render(fr.rgb, fr.index, **STATUS))


def test_views_made_ahead_are_never_written_over(rgb_frames):
    # a frame made ahead lends its arrays to the flow; a run of the chain after a change
    # (bypass here) must not write into them, or turning the change back would show them
    info, frames = rgb_frames
    fr = frames[2]
    s = _session(info)
    ready = s.prepare(fr.index, fr)
    first = s.render(ready, fr.index, **STATUS).copy()
    s.flow.bypass = True
    bypassed = s.render(ready, fr.index, **STATUS).copy()
    assert not np.array_equal(bypassed, first)
    s.flow.bypass = False
    np.testing.assert_array_equal(s.render(ready, fr.index, **STATUS), first)


@pytest.mark.parametrize("bypass", [False, True])
def test_a_10_bit_clip_draws_as_its_8_bit_twin(clip_frames, bypass):
    """10-bit planes holding each 8-bit code ×4 (BT.709 code levels: the same level at
    either depth) draw the same window as the 8-bit planes, made ahead or not, bypassed or
    not: the depth is read, not mistaken for 8-bit codes."""
    import dataclasses
    info, frames = clip_frames
    fr = frames[1]
    deep = dataclasses.replace(fr, **{p: getattr(fr, p).astype(np.uint16) * 4
                                      for p in ("y", "cb", "cr")})
    own = _session(info)
    own.flow.bypass = bypass
    want = own.render_planes(fr, fr.index, **STATUS).copy()
    s = _session(info)
    s.flow.bypass = bypass
    s.in_bits = 10
    np.testing.assert_array_equal(s.render_planes(deep, fr.index, **STATUS), want)
    s2 = _session(info)
    s2.flow.bypass = bypass
    s2.in_bits = 10
    ready = s2.prepare(fr.index, deep)
    np.testing.assert_array_equal(s2.render_planes(ready, fr.index, **STATUS), want)


@pytest.fixture(scope="module")
def rgb_frames_1080(rgb_frames):
    """The demo clip's R′G′B′ frames at 1920×1080 (each sample repeated 3 × 2 ways: 720p
    → 1080p is 3/2; near enough for a picture with detail on every line)."""
    import dataclasses
    info, frames = rgb_frames
    big = []
    for fr in frames:
        a = np.repeat(np.repeat(fr.rgb, 3, axis=0), 3, axis=1)[::2, ::2]
        big.append(dataclasses.replace(fr, rgb=np.ascontiguousarray(a[:1080, :1920])))
    return dataclasses.replace(info, width=1920, height=1080), big


def test_a_1080p30_rgb_frame_runs_only_the_lines_the_window_reads(rgb_frames_1080):
    """At 1080p30 the window reads every second line and sample; only those lines go
    through the chain, each whole, so they equal a full pass's lines bit for bit (with
    night_knee's knee driven line by line from the soundtrack)."""
    from livecurve.preview.window import view_step
    info, frames = rgb_frames_1080
    assert view_step(info) == 2
    fr = frames[1]
    s = _session(info, "night_knee")
    full = s.flow.process_fresh(fr.rgb, fr.index)
    part = s.flow.process_fresh(fr.rgb, fr.index, step=2)
    assert any(np.ndim(v) == 1 and np.ptp(v) > 0 for v in part[3].values())  # per line
    for a, b in zip(full[:2], part[:2], strict=True):
        np.testing.assert_array_equal(a[:, ::2, ::2], b)
    np.testing.assert_array_equal(full[2][::2, ::2], part[2])


@pytest.mark.parametrize("split", [False, True])
def test_a_large_rgb_frame_made_ahead_draws_what_the_window_would_draw(rgb_frames_1080,
                                                                      monkeypatch, split):
    info, frames = rgb_frames_1080
    fr = frames[2]
    own = _session(info, "night_knee")
    own.view.split = split
    want = own.render(fr.rgb, fr.index, **STATUS).copy()
    assert own.flow.planes_out.shape == (3, 540, 960)           # the window's reading
    s = _session(info, "night_knee")
    s.view.split = split
    ready = s.prepare(fr.index, fr)
    calls = []
    real = s.flow.process_fresh
    monkeypatch.setattr(s.flow, "process_fresh",
                        lambda *a, **k: calls.append(a[1]) or real(*a, **k))
    np.testing.assert_array_equal(s.render(ready, fr.index, **STATUS), want)
    assert calls == []
