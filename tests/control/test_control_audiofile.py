"""Audio files as control sources, decoded by the bundled ffmpeg, against the samples we wrote."""

from __future__ import annotations

import subprocess

import imageio_ffmpeg
import numpy as np
import pytest

from livecurve.control import AudioFile
from livecurve.errors import ConfigError, MediaError
from tests.control._wav import write_wav

RATE = 48000
#: A mix is averaged in float64 and stored as float32: half an ulp of float32 at ≤ 1 FS.
TOL_MIX_V = 6e-8


@pytest.fixture(scope="module")
def noise_wav(tmp_path_factory):
    rng = np.random.default_rng(7)
    x = rng.integers(-30000, 30000, size=(RATE // 2, 2))
    path = tmp_path_factory.mktemp("audio") / "noise.wav"
    return path, write_wav(path, x, RATE)


def test_channels_match_the_samples_written(noise_wav):
    # Reference: the 16-bit PCM samples we wrote with the `wave` module; PCM full scale is
    # 32768 (two's complement), so sample s decodes to s/32768.
    path, x = noise_wav
    t = np.arange(x.shape[0]) / RATE
    for ch in (0, 1):
        src = AudioFile(path, channel=ch)
        # times k/rate read sample k exactly (no interpolation residue)
        np.testing.assert_array_equal(src.values_at(t), x[:, ch] / 32768)
    mix = AudioFile(path)
    np.testing.assert_allclose(mix.values_at(t), x.mean(axis=1) / 32768, rtol=0, atol=TOL_MIX_V)
    assert mix.duration_s == x.shape[0] / RATE
    assert mix.sample_rate_hz == RATE


def test_linear_interpolation_and_zero_outside(noise_wav):
    path, x = noise_wav
    src = AudioFile(path, channel=1, gain_v_per_fs=2.5)
    v = x[:, 1] / 32768 * 2.5
    k = np.arange(0, x.shape[0] - 1, 97)
    np.testing.assert_allclose(src.values_at((k + 0.5) / RATE), (v[k] + v[k + 1]) / 2,
                               rtol=0, atol=1e-9)
    np.testing.assert_allclose(src.values_at((k + 0.25) / RATE), 0.75 * v[k] + 0.25 * v[k + 1],
                               rtol=0, atol=1e-9)
    n = x.shape[0]
    # one sample period of ramp to 0 at each end, 0 beyond
    np.testing.assert_allclose(src.values_at([(n - 0.5) / RATE, -0.5 / RATE]),
                               [v[-1] / 2, v[0] / 2], rtol=0, atol=1e-9)
    assert np.all(src.values_at([n / RATE, 5.0, 1e6, -1 / RATE, -3.0]) == 0.0)


def test_resampled_file_keeps_its_timing(tmp_path):
    # A 44.1 kHz file is resampled by ffmpeg to 48 kHz; a 440 Hz sine at half scale must
    # still read as 0.5·sin(2π·440·t) (analytic reference) away from the ends.
    n = 44100
    tone = np.round(16384 * np.sin(2 * np.pi * 440 * np.arange(n) / 44100))
    write_wav(tmp_path / "tone.wav", tone, 44100)
    src = AudioFile(tmp_path / "tone.wav")
    assert src.samples.size == pytest.approx(RATE, abs=2)
    t = np.linspace(0.01, 0.99, 5000)
    np.testing.assert_allclose(src.values_at(t), 0.5 * np.sin(2 * np.pi * 440 * t),
                               rtol=0, atol=2e-3)


def _ffmpeg(*args):
    exe = imageio_ffmpeg.get_ffmpeg_exe()
    subprocess.run([exe, "-nostdin", "-v", "error", "-y", *args], check=True)


def test_clip_soundtrack(tmp_path, noise_wav):
    # A clip's own soundtrack = AudioFile(clip path): mux our WAV (lossless PCM) with a test
    # picture and read it back.
    wav_path, x = noise_wav
    clip = tmp_path / "clip.mkv"
    _ffmpeg("-f", "lavfi", "-i", "testsrc=size=64x48:rate=25:duration=0.5", "-i", str(wav_path),
            "-map", "0:v", "-map", "1:a", "-c:v", "mpeg4", "-c:a", "pcm_s16le", "-shortest",
            str(clip))
    src = AudioFile(clip, channel=0)
    t = np.arange(RATE // 4) / RATE
    np.testing.assert_array_equal(src.values_at(t), x[: t.size, 0] / 32768)


def test_clip_without_audio_names_the_path(tmp_path):
    clip = tmp_path / "silent film.mkv"
    _ffmpeg("-f", "lavfi", "-i", "testsrc=size=64x48:rate=25:duration=0.2", "-c:v", "mpeg4",
            str(clip))
    with pytest.raises(MediaError) as err:
        AudioFile(clip)
    assert str(clip) in str(err.value) and "no audio stream" in str(err.value)


def test_missing_unreadable_and_empty_files_name_the_path(tmp_path):
    with pytest.raises(MediaError, match="not found") as err:
        AudioFile(tmp_path / "gone.wav")
    assert str(tmp_path / "gone.wav") in str(err.value)
    junk = tmp_path / "junk.wav"
    junk.write_bytes(b"this is not audio at all\n" * 40)
    with pytest.raises(MediaError) as err:
        AudioFile(junk)
    assert str(junk) in str(err.value)
    empty = tmp_path / "empty.wav"
    empty.write_bytes(b"")
    with pytest.raises(MediaError) as err:
        AudioFile(empty)
    assert str(empty) in str(err.value)
    no_frames = tmp_path / "no_frames.wav"
    write_wav(no_frames, np.zeros(0), RATE)
    with pytest.raises(MediaError, match="no samples") as err:
        AudioFile(no_frames)
    assert str(no_frames) in str(err.value)


def test_missing_channel_and_bad_arguments(tmp_path):
    mono = tmp_path / "mono.wav"
    write_wav(mono, np.arange(480), RATE)
    with pytest.raises(MediaError, match="1 audio channel") as err:
        AudioFile(mono, channel=1)
    assert str(mono) in str(err.value)
    for bad in (-1, "left", 1.0, True):
        with pytest.raises(ConfigError, match="channel"):
            AudioFile(mono, channel=bad)
    with pytest.raises(ConfigError, match="gain_v_per_fs"):
        AudioFile(mono, gain_v_per_fs=float("nan"))
