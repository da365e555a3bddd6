"""Time-true modulation: control sources sampled at each line's (or pixel's) time on the video
timing, through FrameFlow, render() and bind_controls.

References (see /work/shared/REFERENCES.md):
* 1080p30 raster (SMPTE ST 274): 2200 samples per line, 1125 lines, 74.25 MHz pixel clock,
  so the line rate is 33.75 kHz; the first active line is line 42 and active video starts
  192 samples after the line's timing reference (CEA-861 timing tables).  A tone of f Hz
  therefore repeats every 33 750 / f lines: 33.75 lines at 1 kHz, 16.875 at 2 kHz.
* A knob bound straight from ``--control KNOB=SOURCE`` maps −1 … +1 control volts linearly onto
  the knob's min … max (livecurve's own convention, livecurve.config.controls).
* The DC solver is the reference for the circuit's response (it is checked against ngspice in
  tests/circuit); here it is evaluated at control values computed independently from the
  timing above, so the tests check the timing and the plumbing, not the solver.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import load_chain
from livecurve.engine.frameflow import FrameFlow, bind_controls
from livecurve.errors import ConfigError
from livecurve.media import _ffmpeg
from livecurve.media.source import open_source
from livecurve.outputs.demo import chain_path, demo_clip
from livecurve.outputs.render import render

#: SMPTE ST 274, 1080p30.
PIXEL_CLOCK_HZ = 74.25e6
SAMPLES_PER_LINE = 2200
FIRST_ACTIVE_LINE = 42
ACTIVE_START_SAMPLE = 192
LINE_PERIOD_S = SAMPLES_PER_LINE / PIXEL_CLOCK_HZ

#: float32 slack on volts (see tests/engine/test_engine_pipeline.py).
F32_SLACK_V = 5e-7

#: Mid-grey, 8-bit full-range code 128 (Y′ ≈ 0 V centred), and a light grey (Y′ ≈ +254 mV)
#: for a gain knob to act on.
GREY = 128
BRIGHT = 220

TWO_BUSES = """
title = "two control buses"
space = "ypbpr"
standard = "bt709"
format = "1080p30"
[opamp]
a_ol = "1e9"
[[stage]]
id = "amp"
kind = "inverting_gain"
channels = [0]
r_in = "10k"
r_f = "10k"
[[stage]]
id = "lift"
kind = "inverting_gain"
channels = [0]
r_in = "10k"
r_f = "10k"
r_off = "100k"
v_ref = "10V"
trim = 0.5
[live.gain_rf]
target = "amp.r_f"
min = "5k"
max = "15k"
[live.lift_trim]
target = "lift.trim"
min = 0.4
max = 0.6
[control.swell]           # r_f = 1000·(5·V + 10) ohm: 10 k ± 5 k for ±1 V
drives = "gain_rf"
gain = 5.0
offset = "10V"
scale = 1000.0
rate = "line"
[control.shimmer]         # trim = 0.1·V + 0.5: 0.5 ± 0.1 for ±1 V
drives = "lift_trim"
gain = 0.1
offset = "0.5V"
rate = "{shimmer_rate}"
"""


def _grey(h=1080, w=1920, code=GREY):
    return np.full((h, w, 3), code, np.uint8)


def _grey_y_v(code=GREY) -> float:
    """Centred Y′ volts of a full-range grey code: Y′ = code/255 of 700 mV, minus 350 mV."""
    return code / 255.0 * 0.7 - 0.35


def _row_times(h=1080, frame=0):
    """0H of each active line of a 1080p30 frame (ST 274), s."""
    return frame / 30.0 + (FIRST_ACTIVE_LINE - 1 + np.arange(h)) * LINE_PERIOD_S


def _sine(t, f_hz, amp_v):
    return amp_v * np.sin(2 * np.pi * f_hz * t)


def _period_lines(x: np.ndarray) -> float:
    """Period (in rows) of the strongest tone in *x*: Hann window, 64× zero-padded FFT,
    parabolic interpolation of the peak."""
    x = np.asarray(x, np.float64) - np.mean(x)
    n_pad = 64 * x.size
    sp = np.abs(np.fft.rfft(x * np.hanning(x.size), n_pad))
    k = int(np.argmax(sp[1:])) + 1
    a, b, c = np.log(sp[k - 1]), np.log(sp[k]), np.log(sp[k + 1])
    return n_pad / (k + 0.5 * (a - c) / (a - 2 * b + c))


# -------------------------------------------------------------- bands of a tone


@pytest.fixture(scope="module")
def knee_flow():
    """night_knee at 1080p30 with its knee current modulated (one 2-D table on Y′)."""
    spec = load_chain(chain_path("night_knee"))
    flow = FrameFlow(spec, width=1920, height=1080, fps=30.0, clip_matrix="bt709",
                     controls=bind_controls(spec, ["knee_current=lfo:sine:1kHz:0.5V"]))
    assert flow.timing.fmt.name == "1080p30"
    return spec, flow


@pytest.mark.parametrize(("tone", "lines"), [("1kHz", 33.75), ("2kHz", 16.875)])
def test_tone_makes_bands_at_the_line_rate(knee_flow, tone, lines):
    spec, flow = knee_flow
    flow.controls = bind_controls(spec, [f"knee_current=lfo:sine:{tone}:0.5V"])
    out = flow.process(_grey(), 0)
    # volts: mean over each row, as a function of the row
    assert _period_lines(flow.planes_out[0].mean(axis=1)) == pytest.approx(lines, abs=0.01)
    # and the same bands in the output codes
    assert _period_lines(out.mean(axis=(1, 2))) == pytest.approx(lines, abs=0.05)
    # (a frame clocked at 1080 lines × 30 Hz, i.e. without vertical blanking, would give a
    # 32.4 kHz line rate and 32.4 lines at 1 kHz: the tolerance separates the two by far)


def test_each_row_sees_the_knob_at_its_own_time(knee_flow):
    spec, flow = knee_flow
    flow.controls = bind_controls(spec, ["knee_current=lfo:sine:1kHz:0.5V"])
    flow.process(_grey(), 0)
    ls = spec.live["knee_current"]
    mid, half = 0.5 * (ls.lo + ls.hi), 0.5 * (ls.hi - ls.lo)
    knob = mid + half * _sine(_row_times(), 1000.0, 0.5)
    np.testing.assert_allclose(flow.last_controls["knee_current"], knob, rtol=1e-9, atol=0)
    # the circuit's answer for each row, at the row's right end (the line filter has settled:
    # 1900 pixels ≫ the 11.4 MHz closed-loop pole's 1.0-pixel time constant)
    model = ChainModel(spec)
    rows = np.arange(0, 1080, 9)
    ref = np.array([model.transfer(0, [_grey_y_v()], live={"knee_current": c},
                                   t_kelvin=flow.engine.state.t_kelvin)[0] for c in knob[rows]])
    got = flow.planes_out[0, rows, -1]
    bound = flow.engine.worst_table_err_v + F32_SLACK_V
    assert np.max(np.abs(got - ref)) <= bound
    assert np.ptp(ref) > 0.05  # 50 mV of modulation depth: the check is not vacuous


# ------------------------------------------------------------------ determinism


@pytest.fixture(scope="module")
def swelling_clip(tmp_path_factory):
    """1 s, 320×180 at 30 frame/s with a 440 Hz tone whose loudness swells at 2 Hz, so
    night_knee's soundtrack-driven knee moves from frame to frame."""
    d = tmp_path_factory.mktemp("swell")
    p = d / "swell.mp4"
    res = _ffmpeg.run(["-v", "error", "-y", "-f", "lavfi", "-i",
                       "testsrc2=size=320x180:rate=30:duration=1", "-f", "lavfi", "-i",
                       "aevalsrc=sin(2*PI*440*t)*(0.5+0.45*sin(2*PI*2*t)):s=48000:d=1",
                       "-c:v", "libx264", "-pix_fmt", "yuv420p", "-c:a", "aac", "-shortest",
                       str(p)], timeout_s=120)
    assert res.returncode == 0, res.stderr.decode()[-800:]
    with open_source(str(p)) as src:
        frames = {f.index: f.rgb for f in src}
    return p, src.info, frames


def _clip_flow(spec, info, clip, **kw):
    return FrameFlow(spec, width=info.width, height=info.height, fps=info.fps,
                     clip_matrix=info.colour_matrix,
                     controls=bind_controls(spec, [], clip_path=str(clip)), **kw)


def test_same_frame_gives_the_same_output_in_any_order(swelling_clip):
    clip, info, frames = swelling_clip
    spec = load_chain(chain_path("night_knee"))  # [control.beat] = the clip's soundtrack
    flow = _clip_flow(spec, info, clip)
    # frame 12 (0.4 s) sits in a quiet trough of the 2 Hz swell, frame 3 (0.1 s) near a peak
    a = flow.process(frames[12], 12).copy()
    flow.process(frames[3], 3)
    b = flow.process(frames[12], 12).copy()
    np.testing.assert_array_equal(a, b)
    fresh = _clip_flow(spec, info, clip).process(frames[12], 12)
    np.testing.assert_array_equal(a, fresh)
    # the frame's time matters: the same picture processed as frame 3 comes out different
    assert np.any(flow.process(frames[12], 3) != a)


def test_frame_k_of_a_render_equals_a_fresh_frameflow(tmp_path, swelling_clip):
    clip, info, frames = swelling_clip
    spec = load_chain(chain_path("night_knee"))
    out = tmp_path / "graded.mkv"  # ffv1, lossless 16-bit R′G′B′ (RFC 9043)
    render(spec, str(clip), out, progress=False)
    with open_source(str(out)) as src:
        rendered = {f.index: f.rgb for f in src}
    assert sorted(rendered) == sorted(frames)
    knobs = []
    flow = _clip_flow(spec, info, clip, out_dtype=np.uint16)  # not the render's own
    for k in (29, 0, 11):  # out of order
        np.testing.assert_array_equal(rendered[k], flow.process(frames[k], k))
        knobs.append(flow.last_controls["knee_current"].mean())
    # the soundtrack did move the knee between these frames (> 1 µA)
    assert np.ptp(knobs) > 1e-6


# --------------------------------------------------------------- two buses, pixel rate


@pytest.fixture(scope="module", params=["pixel", "line"])
def two_bus_flow(request, tmp_path_factory):
    p = tmp_path_factory.mktemp("buses") / "two_buses.toml"
    p.write_text(TWO_BUSES.format(shimmer_rate=request.param), encoding="utf-8")
    spec = load_chain(p)
    ctl = bind_controls(spec, ["swell=lfo:sine:1kHz:1V", "shimmer=lfo:sine:200kHz:1V"])
    flow = FrameFlow(spec, width=1920, height=1080, fps=30.0, controls=ctl)
    return request.param, spec, flow


def test_two_buses_each_drive_their_own_stage(two_bus_flow):
    rate, spec, flow = two_bus_flow
    eng = flow.engine
    assert [[s.id for s in r.stages] for r in eng.runs[0]] == [["amp"], ["lift"]]
    assert [r.knob for r in eng.runs[0]] == ["gain_rf", "lift_trim"]
    flow.process(_grey(code=BRIGHT), 0)
    y = flow.planes_out[0]
    # independent control values at ST 274 times
    t_row = _row_times()
    rows = np.arange(3, 1080, 61)
    cols = np.arange(0, 1920, 113)
    r_f = 1000.0 * (5.0 * _sine(t_row, 1e3, 1.0) + 10.0)
    t_pix = t_row[:, None] + (ACTIVE_START_SAMPLE + np.arange(1920)) / PIXEL_CLOCK_HZ
    t_shimmer = t_pix if rate == "pixel" else np.broadcast_to(t_row[:, None], t_pix.shape)
    trim = 0.1 * _sine(t_shimmer, 200e3, 1.0) + 0.5
    model = ChainModel(spec)
    v = [_grey_y_v(BRIGHT)]

    def solve(rf, tr):
        return model.transfer(0, v, live={"gain_rf": rf, "lift_trim": tr},
                              t_kelvin=eng.state.t_kelvin)[0]

    ref = np.array([[solve(r_f[r], trim[r, c]) for c in cols] for r in rows])
    bound = sum(r.table.err_v for r in eng.runs[0]) + F32_SLACK_V
    got = y[np.ix_(rows, cols)]
    assert np.max(np.abs(got - ref)) <= bound
    # each bus matters: holding either one at its knob's start value misses by far
    rf0, tr0 = spec.live["gain_rf"].value, spec.live["lift_trim"].value
    no_swell = np.array([[solve(rf0, trim[r, c]) for c in cols] for r in rows])
    no_shimmer = np.array([[solve(r_f[r], tr0) for c in cols] for r in rows])
    assert np.max(np.abs(got - no_swell)) > 1000 * bound
    assert np.max(np.abs(got - no_shimmer)) > 1000 * bound
    # Pb and Pr carry no stage
    np.testing.assert_array_equal(flow.planes_out[1:], flow.planes_in[1:])


def test_pixel_rate_varies_along_a_row(two_bus_flow):
    rate, spec, flow = two_bus_flow
    flow.process(_grey(code=BRIGHT), 0)
    row = flow.planes_out[0, 500]
    if rate == "pixel":
        # 200 kHz over 1920 samples (25.9 µs): about five periods along one row
        assert np.ptp(row) > 0.05
        assert flow.last_controls["lift_trim"].shape == (1080, 1920)
    else:
        assert np.ptp(row) == 0.0
        assert flow.last_controls["lift_trim"].shape == (1080,)


# --------------------------------------------------------------------- binding


def test_unknown_control_name_is_a_config_error_naming_it():
    spec = load_chain(chain_path("night_knee"))
    with pytest.raises(ConfigError) as info:
        bind_controls(spec, ["knee_curent=lfo:sine:1kHz:0.5V"])
    msg = str(info.value)
    assert "knee_curent" in msg and "--control" in msg
    assert "knee_current" in msg and "beat" in msg  # what would be accepted


def test_bare_source_needs_a_name_when_several_blocks(tmp_path):
    p = tmp_path / "two.toml"
    p.write_text(TWO_BUSES.format(shimmer_rate="line"), encoding="utf-8")
    with pytest.raises(ConfigError, match="NAME=SOURCE"):
        bind_controls(load_chain(p), ["lfo:sine:1kHz:1V"])


def test_explicit_knob_replaces_the_blocks_default_source():
    # night_knee's [control.beat] drives knee_current from the clip by default; naming the
    # knob itself replaces that binding (no clip is needed) instead of clashing with it.
    spec = load_chain(chain_path("night_knee"))
    bound = bind_controls(spec, ["knee_current=lfo:sine:2Hz:1V"])
    assert [(cs.name, cs.drives) for cs, _ in bound] == [("knee_current", "knee_current")]
    # two explicit options on one knob still clash
    with pytest.raises(ConfigError, match="same live parameter"):
        bind_controls(spec, ["knee_current=const:0V", "beat=const:1V"])
    # with no option the block's own source (the clip's soundtrack) is bound when there is
    # a clip, and left out when there is none (a still: the knob keeps its value)
    bound = bind_controls(spec, [], clip_path=str(demo_clip()))
    assert [(cs.name, cs.source) for cs, _ in bound] == [("beat", "clip")]
    assert bind_controls(spec, []) == []
