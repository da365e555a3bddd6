"""One frame's whole path (livecurve.engine.frameflow) and render() (livecurve.outputs.render).

References (see /work/shared/REFERENCES.md):
* Inverting amplifier: closed-loop gain −(Rf/Rin)/(1 + (1 + Rf/Rin)/A_OL) (any op-amp text;
  common practice).  With A_OL = 1e9 the error is ~2e-9 of the signal, ~1e-6 of a 10-bit
  code step, so two unity stages are an identity for every code.
* Y′CbCr ↔ R′G′B′ (ITU-R BT.709-6): checked with colour-science (colour.RGB_to_YCbCr /
  colour.YCbCr_to_RGB).  Scaling Pb/Pr by g keeps Y′ and gives R′G′B′ = g·RGB + (1 − g)·Y′
  (follows from the matrix being linear with Y′ = (Y′, Y′, Y′) on the grey axis).
* Code counts: legal 8-bit Y′CbCr has 220·225·225 ≈ 11.1 M codes for 2^24 ≈ 16.8 M R′G′B′
  colours (ITU-R BT.709 code ranges), so an 8-bit Y′CbCr converter cannot round-trip every
  8-bit R′G′B′ code; a 10-bit one can (livecurve.signal.levels documents the bound).
* PNG bit depth: byte 24 of a PNG file is the IHDR bit depth (RFC 2083 / ISO/IEC 15948).
* Audio is carried by stream copy; ffmpeg's md5 muxer over ``-map 0:a -c copy`` hashes the
  packets themselves, so equal hashes mean bit-identical audio.
"""

from __future__ import annotations

import warnings

import cv2
import numpy as np
import pytest

from livecurve.config.chainfile import load_chain
from livecurve.engine.frameflow import FrameFlow
from livecurve.engine.pipeline import FrameEngine
from livecurve.errors import LivecurveError, MediaError, OutputError
from livecurve.media import _ffmpeg
from livecurve.media.probe import probe, read_image
from livecurve.media.source import open_source
from livecurve.outputs.demo import chain_path, demo_clip
from livecurve.outputs.render import render

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # colour-science warns that matplotlib is absent
    import colour

BT709 = colour.WEIGHTS_YCBCR["ITU-R BT.709"]

IDENTITY = """
title = "identity: two unity inverting stages"
space = "{space}"
standard = "bt709"
[opamp]
a_ol = "1e9"
[converter]
bits = {bits}
range = "legal"
[[stage]]
id = "flip"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
[[stage]]
id = "flop"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
"""

CHROMA_HALF = """
title = "chroma at half: −10k/20k then −1 on Pb and Pr"
space = "ypbpr"
standard = "bt709"
[opamp]
a_ol = "1e9"
[[stage]]
id = "atten"
kind = "inverting_gain"
channels = [1, 2]
r_in = "20k"
r_f = "10k"
[[stage]]
id = "restore"
kind = "inverting_gain"
channels = [1, 2]
r_in = "10k"
r_f = "10k"
"""


def _chain(tmp_path, text, name="chain.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return load_chain(p)


def ffmpeg(*args: str) -> bytes:
    res = _ffmpeg.run(["-v", "error", *args], timeout_s=120)
    if res.returncode != 0:
        pytest.fail(f"ffmpeg {' '.join(args)} failed: {res.stderr.decode()[-800:]}")
    return res.stdout


def audio_md5(path) -> str:
    """md5 of the first audio stream's packets (stream copy into ffmpeg's md5 muxer)."""
    return ffmpeg("-i", str(path), "-map", "0:a", "-c", "copy", "-f", "md5", "-").decode().strip()


@pytest.fixture(scope="module")
def demo_frames():
    """Three decoded frames of the demo clip (0 s, 2.5 s, 5 s)."""
    out = []
    for t in (0.0, 2.5, 5.0):
        with open_source(str(demo_clip()), start_s=t, duration_s=0.04) as src:
            out.append(next(iter(src)))
    return out


@pytest.fixture(scope="module")
def short_clip(tmp_path_factory):
    """1 s, 320×180, 30 frame/s H.264 test pattern with a 48 kHz AAC tone whose loudness
    swells at 2 Hz (made by ffmpeg's own lavfi generators)."""
    d = tmp_path_factory.mktemp("render_src")
    p = d / "src.mp4"
    ffmpeg("-y", "-f", "lavfi", "-i", "testsrc2=size=320x180:rate=30:duration=1",
           "-f", "lavfi", "-i", "aevalsrc=sin(2*PI*440*t)*(0.5+0.45*sin(2*PI*2*t)):s=48000:d=1",
           "-c:v", "libx264", "-pix_fmt", "yuv420p", "-c:a", "aac", "-shortest", str(p))
    return p


# ------------------------------------------------------------------ round trips


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_identity_chain_round_trip_is_exact_on_demo_frames(tmp_path, space, demo_frames):
    spec = _chain(tmp_path, IDENTITY.format(space=space, bits=10))
    h, w = demo_frames[0].rgb.shape[:2]
    flow = FrameFlow(spec, width=w, height=h, fps=30.0, clip_matrix="bt709")
    for fr in demo_frames:
        out = flow.process(fr.rgb, fr.index)
        np.testing.assert_array_equal(out, fr.rgb)
        # the chain really ran: both stages fused into one table on every channel
        assert [[len(r.stages) for r in rs] for rs in flow.engine.runs] == [[2], [2], [2]]


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_identity_chain_round_trip_is_exact_on_random_codes(tmp_path, space):
    spec = _chain(tmp_path, IDENTITY.format(space=space, bits=10))
    rgb = np.random.default_rng(7).integers(0, 256, (120, 200, 3), dtype=np.uint8)
    flow = FrameFlow(spec, width=200, height=120, fps=30.0)
    np.testing.assert_array_equal(flow.process(rgb, 0), rgb)


def test_eight_bit_ycbcr_converter_cannot_round_trip(tmp_path):
    # Pigeonhole (ITU-R BT.709 code ranges): 11.1 M legal 8-bit Y′CbCr codes < 16.8 M
    # R′G′B′ colours, so some of a random frame's codes must come back different.
    spec = _chain(tmp_path, IDENTITY.format(space="ypbpr", bits=8))
    rgb = np.random.default_rng(7).integers(0, 256, (120, 200, 3), dtype=np.uint8)
    flow = FrameFlow(spec, width=200, height=120, fps=30.0)
    out = flow.process(rgb, 0)
    assert np.any(out != rgb)
    assert np.max(np.abs(out.astype(int) - rgb)) <= 2  # but close: a converter step or so


def test_chroma_gain_chain_on_demo_frame(tmp_path, demo_frames):
    spec = _chain(tmp_path, CHROMA_HALF)
    fr = demo_frames[1]
    h, w = fr.rgb.shape[:2]
    flow = FrameFlow(spec, width=w, height=h, fps=30.0, clip_matrix="bt709")
    out = flow.process(fr.rgb, fr.index).copy()
    # volts: Y′ untouched; Pb, Pr × (−10k/20k)·(−10k/10k) = +0.5 (any op-amp text)
    gain = (10e3 / 20e3) * (10e3 / 10e3)
    np.testing.assert_array_equal(flow.planes_out[0], flow.planes_in[0])
    bound = flow.engine.worst_table_err_v + 5e-7  # table bound + float32 rounding
    np.testing.assert_allclose(flow.planes_out[1:], gain * flow.planes_in[1:].astype(np.float64),
                               atol=bound, rtol=0)
    # codes: colour-science's BT.709 Y′CbCr with the chroma halved, back to 8-bit R′G′B′
    ycc = colour.RGB_to_YCbCr(fr.rgb / 255.0, K=BT709, out_legal=False)
    ycc[..., 1:] *= gain
    ref = colour.YCbCr_to_RGB(ycc, K=BT709, in_legal=False, out_legal=False)
    # closed form of the same thing: R′G′B′ = g·RGB + (1 − g)·Y′
    np.testing.assert_allclose(ref, gain * fr.rgb / 255.0 + (1 - gain) * ycc[..., :1],
                               atol=1e-12)
    diff = out.astype(np.int64) - np.round(ref * 255.0).astype(np.int64)
    assert np.abs(diff).max() <= 1  # the 10-bit converter's half step, seen at 8 bits
    assert np.any(out != fr.rgb)  # the picture did change


# ------------------------------------------------------------------- render()


def test_render_side_by_side_clip(tmp_path, short_clip):
    spec = load_chain(chain_path("film_shoulder"))
    out = tmp_path / "sbs.mp4"
    rep = render(spec, str(short_clip), out, side_by_side=True, progress=False)
    assert rep.output == str(out) and rep.frames == 30
    src, got = probe(short_clip), probe(out)
    assert (got.width, got.height) == (2 * src.width, src.height) == (640, 180)
    assert got.n_frames == src.n_frames == 30 and got.n_frames_exact
    assert got.fps == pytest.approx(30.0)
    assert got.has_audio and got.audio_rate == 48000
    assert audio_md5(out) == audio_md5(short_clip)
    assert rep.table_bound_v == FrameEngine(spec).worst_table_err_v
    assert [p.name for p in tmp_path.iterdir()] == ["sbs.mp4"]  # no temporary left


def test_lossless_side_by_side_halves(tmp_path, short_clip):
    # ffv1 is lossless (RFC 9043): the left half is the source widened to 16 bits (×257,
    # 8-bit full scale onto 16-bit full scale), the right half a fresh FrameFlow's output.
    spec = load_chain(chain_path("shadow_crush"))
    out = tmp_path / "sbs.mkv"
    render(spec, str(short_clip), out, side_by_side=True, progress=False)
    with open_source(str(short_clip)) as s:
        info = s.info
        frames = {f.index: f.rgb for f in s if f.index in (0, 17)}
    with open_source(str(out)) as s:
        outs = {f.index: f.rgb for f in s if f.index in (0, 17)}
    flow = FrameFlow(spec, width=info.width, height=info.height, fps=info.fps,
                     clip_matrix=info.colour_matrix, out_dtype=np.uint16)
    for k, rgb in frames.items():
        o = outs[k]
        assert o.dtype == np.uint16 and o.shape == (180, 640, 3)
        np.testing.assert_array_equal(o[:, :320], rgb.astype(np.uint16) * 257)
        np.testing.assert_array_equal(o[:, 320:], flow.process(rgb, k))


@pytest.mark.parametrize("exc", [KeyboardInterrupt, RuntimeError])
def test_interrupted_render_leaves_nothing(tmp_path, short_clip, monkeypatch, exc):
    spec = load_chain(chain_path("shadow_crush"))
    real = FrameFlow.process
    seen = []

    def failing(self, rgb, frame_index):
        seen.append(frame_index)
        if len(seen) == 12:
            raise exc("stopped in the middle")
        return real(self, rgb, frame_index)

    monkeypatch.setattr(FrameFlow, "process", failing)
    out = tmp_path / "out.mp4"
    with pytest.raises(OutputError) as info:
        render(spec, str(short_clip), out, progress=False)
    msg = str(info.value)
    assert str(out) in msg and "no output was written" in msg
    if exc is KeyboardInterrupt:
        assert "interrupted" in msg
    assert len(seen) == 12  # it was stopped mid-way, not before the first frame
    assert list(tmp_path.iterdir()) == []  # neither the output nor a temporary file


def test_existing_output_is_refused_without_force(tmp_path, short_clip):
    spec = load_chain(chain_path("shadow_crush"))
    out = tmp_path / "out.mp4"
    out.write_bytes(b"keep me")
    with pytest.raises(OutputError, match="exists; use --force"):
        render(spec, str(short_clip), out, progress=False)
    assert out.read_bytes() == b"keep me"
    render(spec, str(short_clip), out, force=True, progress=False, duration_s=0.2)
    assert probe(out).n_frames == 6
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.mp4"]


def test_corrupt_input_is_a_media_error(tmp_path):
    bad = tmp_path / "noise.mp4"
    bad.write_bytes(np.random.default_rng(3).integers(0, 256, 50_000, dtype=np.uint8).tobytes())
    spec = load_chain(chain_path("shadow_crush"))
    with pytest.raises(MediaError) as info:
        render(spec, str(bad), tmp_path / "out.mp4", progress=False)
    assert isinstance(info.value, LivecurveError) and str(bad) in str(info.value)
    assert [p.name for p in tmp_path.iterdir()] == ["noise.mp4"]


def test_still_to_sixteen_bit_png(tmp_path, demo_frames):
    src = tmp_path / "still.png"
    crop = np.ascontiguousarray(demo_frames[2].rgb[200:440, 500:820])
    assert cv2.imwrite(str(src), cv2.cvtColor(crop, cv2.COLOR_RGB2BGR))
    spec = load_chain(chain_path("film_shoulder"))
    out = tmp_path / "graded.png"
    rep = render(spec, str(src), out, progress=False)
    assert rep.frames == 1
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    assert data[24] == 16  # IHDR bit depth (RFC 2083)
    got = cv2.cvtColor(cv2.imread(str(out), cv2.IMREAD_UNCHANGED), cv2.COLOR_BGR2RGB)
    flow = FrameFlow(spec, width=320, height=240, fps=30.0, out_dtype=np.uint16)
    expected = flow.process(read_image(src), 0)
    assert got.dtype == np.uint16
    np.testing.assert_array_equal(got, expected)
    assert np.any(got != crop.astype(np.uint16) * 257)  # the chain changed the picture


def test_clip_to_png_is_refused(tmp_path, short_clip):
    spec = load_chain(chain_path("shadow_crush"))
    with pytest.raises(OutputError, match="still or an image sequence"):
        render(spec, str(short_clip), tmp_path / "x.png", progress=False)
    assert list(tmp_path.iterdir()) == []


def test_render_reports_unknown_control(tmp_path, short_clip):
    spec = load_chain(chain_path("night_knee"))
    with pytest.raises(LivecurveError, match="nosuch"):
        render(spec, str(short_clip), tmp_path / "o.mp4", controls=["nosuch=const:1V"],
               progress=False)
    assert list(tmp_path.iterdir()) == []

