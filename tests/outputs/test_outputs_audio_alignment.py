"""A render that starts part-way into a clip carries the source's audio from that time.

The source clips are made by the bundled ffmpeg's lavfi generators: a test pattern and a
linear chirp (200 Hz rising 800 Hz per second), whose autocorrelation has one sharp
peak, so cross-correlating the output's audio against the source's audio finds where in
the source the output's audio comes from, to the sample.

Reference: the bundled ffmpeg decodes both files to 48 kHz float samples on their own
timelines (``aresample=async=1:first_pts=0`` pads or trims so that sample k is at
k/48000 s of the file's timeline, FFmpeg filter documentation).  The promise is
"sample-accurate within one audio frame": a stream copy cuts on packet boundaries, so
the output's audio may begin up to one packet away from the start time.  Packets here are
1024 samples (an AAC-LC frame is 1024 samples, ISO/IEC 14496-3, common practice; the
PCM-in-Matroska packets ffmpeg writes were measured at 1024 samples), checked below.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.config.chainfile import load_chain
from livecurve.media import _ffmpeg
from livecurve.media.probe import probe
from livecurve.outputs.demo import chain_path
from livecurve.outputs.render import render

RATE = 48000
AUDIO_FRAME = 1024  # samples per packet of both sources (checked in the fixture)
SECONDS = 3.0


def ffmpeg(*args: str) -> bytes:
    res = _ffmpeg.run(["-v", "error", *args], timeout_s=120)
    if res.returncode != 0:
        pytest.fail(f"ffmpeg {' '.join(args)} failed: {res.stderr.decode()[-800:]}")
    return res.stdout


def decoded_audio(path) -> np.ndarray:
    """Mono float32 samples of the first audio stream, sample k at k/48000 s."""
    raw = ffmpeg("-i", str(path), "-map", "0:a:0", "-af", "aresample=async=1:first_pts=0",
                 "-ac", "1", "-ar", str(RATE), "-f", "f32le", "-")
    return np.frombuffer(raw, dtype="<f4").astype(np.float64)


def packet_samples(path) -> set[int]:
    """Samples per audio packet (ffmpeg's framecrc muxer lists each packet's size)."""
    text = ffmpeg("-i", str(path), "-map", "0:a:0", "-c", "copy", "-f", "framecrc", "-")
    lines = text.decode().splitlines()
    codec = next(ln.split(":")[1].strip() for ln in lines if ln.startswith("#codec_id"))
    tb = next(ln.split(":")[1].strip() for ln in lines if ln.startswith("#tb"))
    rows = [ln.split(",") for ln in lines if ln and not ln.startswith("#")]
    if codec.startswith("pcm_s16"):
        return {int(r[4]) // 2 for r in rows[:-1]}  # mono 16-bit: 2 bytes a sample
    assert tb == f"1/{RATE}", tb
    return {int(r[3]) for r in rows[:-1]}


@pytest.fixture(scope="module", params=[("mp4", "aac", "libx264"), ("mkv", "pcm_s16le", "ffv1")],
                ids=["aac-mp4", "pcm-mkv"])
def chirp_clip(request, tmp_path_factory):
    ext, acodec, vcodec = request.param
    p = tmp_path_factory.mktemp("chirp") / f"chirp.{ext}"
    ffmpeg("-y", "-f", "lavfi", "-i", f"testsrc2=size=64x48:rate=25:duration={SECONDS}",
           "-f", "lavfi", "-i",
           f"aevalsrc=0.5*sin(2*PI*(200*t+400*t*t)):s={RATE}:d={SECONDS}",
           "-c:v", vcodec, "-pix_fmt", "yuv420p", "-c:a", acodec, "-shortest", str(p))
    assert packet_samples(p) == {AUDIO_FRAME}
    return p


def _source_time_of(out_audio: np.ndarray, src_audio: np.ndarray) -> int:
    """Source sample index where the output's first 0.5 s of audio matches best."""
    probe = out_audio[AUDIO_FRAME: AUDIO_FRAME + RATE // 2]  # skip a possible codec ramp-in
    n = src_audio.size + probe.size
    nfft = 1 << (n - 1).bit_length()
    corr = np.fft.irfft(np.fft.rfft(src_audio, nfft) * np.conj(np.fft.rfft(probe, nfft)), nfft)
    lag = int(np.argmax(corr[: src_audio.size - probe.size]))
    seg = src_audio[lag: lag + probe.size]
    # the match is real: the chirp segment there is the same waveform (AAC is lossy)
    assert np.corrcoef(seg, probe)[0, 1] > 0.99
    return lag - AUDIO_FRAME


@pytest.mark.parametrize("start_s, duration_s", [(1.5, None), (0.76, 1.0)])
def test_render_from_start_carries_audio_from_start(tmp_path, chirp_clip, start_s, duration_s):
    spec = load_chain(chain_path("shadow_crush"))
    out = tmp_path / f"out{chirp_clip.suffix}"
    render(spec, str(chirp_clip), out, start_s=start_s, duration_s=duration_s, progress=False)
    src, got = decoded_audio(chirp_clip), decoded_audio(out)
    want = round(start_s * RATE)
    lag = _source_time_of(got, src)
    # output audio sample 0 is source sample `lag`: the start time, to within one packet
    # (a stream copy cuts on packet boundaries)
    assert abs(lag - want) <= AUDIO_FRAME, (lag, want)
    # and it lasts as long as the render: the clip's rest or the asked duration,
    # to within one packet at either end
    span = (SECONDS - start_s) if duration_s is None else duration_s
    assert abs(got.size - span * RATE) <= 2 * AUDIO_FRAME, (got.size, span * RATE)
    # the pictures are all there too (25 frame/s source): the audio trim drops no frame
    # (which frame a start between two frames begins on is the frame loop's business)
    info = probe(out)
    assert abs(info.n_frames - span * 25) <= 1, (info.n_frames, span * 25)
