"""Test signals against their definitions, and ``pattern:`` sources in render and preview.

Sources: 75 % BT.709 colour-bar codes from REFERENCES.md (computed from BT.709; SMPTE RP 219
defines HD bars) and colour-science ``RGB_to_YCbCr``; sine-squared pulse and T = 1/(2·f_c)
(ITU-T J.61/J.63, IEEE Std 511, from memory); HD nominal bandwidth 30 MHz (from memory), BT.601
5.75 MHz passband (BT.601 filter template).
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from livecurve.errors import MediaError
from livecurve.media.pattern import PatternSource, parse_pattern
from livecurve.media.source import open_source
from livecurve.signal import patterns
from livecurve.signal.component import ypbpr_to_rgb_matrix
from livecurve.signal.timing import get_format
from tests.conftest import run_cli
from tests.signal._colour_ref import COLOUR_KEYS, colour_module

HD = get_format("1080p30")

#: REFERENCES.md "75 % colour bars, BT.709, 8-bit Y′/Cb/Cr" (computed from BT.709).
BARS75_709 = {"white": (180, 128, 128), "yellow": (168, 44, 136), "cyan": (145, 147, 44),
              "green": (133, 63, 52), "magenta": (63, 193, 204), "red": (51, 109, 212),
              "blue": (28, 212, 120)}


def _codes8(ypbpr):
    """Normalised Y′PbPr → 8-bit legal codes (BT.709: 16 + 219·Y′, 128 + 224·Pb/Pr)."""
    y, pb, pr = ypbpr
    return (np.floor(16 + 219 * y + 0.5).astype(int), np.floor(128 + 224 * pb + 0.5).astype(int),
            np.floor(128 + 224 * pr + 0.5).astype(int))


def _bar_values(ln):
    w = ln.shape[1]
    n = len(patterns.BAR_ORDER)
    return {name: ln[:, int((i + 0.5) * w / n)] for i, (name, _c) in enumerate(patterns.BAR_ORDER)}


def test_75_percent_bars_match_the_published_codes():
    bars = _bar_values(patterns.line("bars", HD, standard="bt709", amp=75))
    for name, codes in BARS75_709.items():
        assert tuple(int(c) for c in _codes8(bars[name])) == codes, name


@pytest.mark.parametrize("standard", ["bt709", "bt601", "bt2020"])
@pytest.mark.parametrize("amp", [75, 100])
def test_bars_match_colour_science(standard, amp):
    colour = colour_module()
    bars = _bar_values(patterns.line("bars", HD, standard=standard, amp=amp))
    k = colour.WEIGHTS_YCBCR[COLOUR_KEYS[standard]]
    for name, rgb in patterns.BAR_ORDER:
        ref = colour.RGB_to_YCbCr(np.array(rgb, float) * amp / 100, K=k, out_legal=False)
        assert np.allclose(bars[name], ref, atol=1e-12), name


def test_staircase_treads_and_ramp():
    for steps in (5, 10):
        ln = patterns.line("staircase", HD, steps=steps)
        assert np.all(ln[1:] == 0.0)
        for lv, (a, b) in zip(patterns.staircase_levels(steps),
                              patterns.tread_windows(HD.active_w, steps), strict=True):
            assert np.allclose(ln[0, a:b], lv, atol=1e-15)   # flat treads at k/steps
        assert np.all(np.diff(ln[0]) >= -1e-15)              # a staircase only rises
    ramp = patterns.line("ramp", HD)[0]
    assert ramp.min() == 0.0 and ramp.max() == 1.0 and np.all(np.diff(ramp) >= 0)


def test_sine_squared_pulse_half_amplitude_duration():
    t_s = patterns.t_step_s(HD)
    assert t_s == pytest.approx(1 / 60e6)                     # T = 1/(2·30 MHz) = 16.7 ns
    assert patterns.t_step_s(get_format("576i")) == pytest.approx(1 / 11.5e6)  # 5.75 MHz
    had = 2 * t_s
    t = np.linspace(-3 * had, 3 * had, 600001)
    p = patterns.sin2_pulse(t, 0.0, had)
    above = t[p >= 0.5]
    assert above[-1] - above[0] == pytest.approx(had, rel=1e-4)   # width at half amplitude
    # the area of a sin² pulse is its HAD (peak 1): ∫cos²(πt/2h) dt over ±h = h
    assert np.trapezoid(p, t) == pytest.approx(had, rel=1e-6)


def test_multiburst_packets_at_format_frequencies():
    assert np.allclose(patterns.packet_frequencies_hz(HD) / 1e6, [1, 5, 10, 15, 20, 25, 30])
    ln = patterns.line("multiburst", HD)[0]
    tp = 1 / HD.pixel_clock_hz
    for (a, b), f in zip(patterns.burst_windows(HD.active_w)[2:],
                         patterns.packet_frequencies_hz(HD), strict=True):
        seg = ln[a:b] - patterns.BURST_PEDESTAL
        spec = np.abs(np.fft.rfft(seg * np.hanning(seg.size), 1 << 16))
        peak = np.argmax(spec) / (1 << 16) / tp
        assert peak == pytest.approx(f, rel=0.01)
        assert np.max(np.abs(seg)) == pytest.approx(patterns.BURST_PP / 2, rel=0.02)


def test_timing_pulses_coincide_on_all_channels():
    ln = patterns.line("timing", HD)
    peaks = [set(np.flatnonzero(ln[c] - ln[c].min() > 0.149)) for c in range(3)]
    assert peaks[0] == peaks[1] == peaks[2] and len(peaks[0]) == 7
    rgb = ypbpr_to_rgb_matrix("bt709") @ ln      # stays inside the R′G′B′ cube (no clipping)
    assert 0.0 < rgb.min() and rgb.max() < 1.0


def test_pattern_source_frames_and_errors():
    with open_source("pattern:flat:level=50,frames=3,format=720p60") as src:
        assert (src.info.width, src.info.height, src.info.fps) == (1280, 720, 60.0)
        assert src.info.kind == "sequence" and src.info.n_frames == 3
        frames = list(src)
    assert len(frames) == 3
    assert np.all(frames[0].rgb == round(0.5 * 65535))
    with open_source("pattern:bars:amp=100") as src:
        assert src.info.kind == "still"
        rgb = src.read().rgb
    assert rgb.dtype == np.uint16 and set(np.unique(rgb)) == {0, 65535}
    for bad in ("pattern:bogus", "pattern:bars:amp=80", "pattern:bars:colour=1",
                "pattern:flat:level=x", "pattern:bars:format=999p", "pattern:pulse:had=0",
                "pattern:flat:frames=0", "pattern:sweep:to=40MHz", "pattern:staircase:steps=7"):
        with pytest.raises(MediaError, match="pattern:"):
            PatternSource(bad)
    assert parse_pattern("pattern:sweep:to=20MHz")[1] == {"to_hz": 20e6}


CHAIN = """
title = "unity"
space = "ypbpr"
standard = "bt709"
[[stage]]
id = "a"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
[[stage]]
id = "b"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
"""


def test_pattern_renders_and_previews(tmp_path):
    chain = tmp_path / "unity.toml"
    chain.write_text(CHAIN)
    out = tmp_path / "bars.png"
    r = run_cli("render", "pattern:bars", out, "--chain", chain, "--quiet")
    assert r.returncode == 0, r.stderr
    img = cv2.imread(str(out), cv2.IMREAD_UNCHANGED)
    assert img.shape == (1080, 1920, 3) and img.dtype == np.uint16
    # through a unity chain the 75 % bars come back: yellow = R′ G′ at 75 %, B′ at 0
    yellow = img[540, int(1.5 * 1920 / 8)][::-1] / 65535
    assert np.allclose(yellow, [0.75, 0.75, 0.0], atol=2e-3)
    snap = tmp_path / "snap.png"
    r = run_cli("preview", "pattern:staircase:steps=5", "--chain", chain, "--snapshot", snap)
    assert r.returncode == 0, r.stderr
    assert cv2.imread(str(snap)) is not None
    r = run_cli("render", "pattern:nothing", tmp_path / "x.png", "--chain", chain)
    assert r.returncode == 2 and "unknown test signal" in r.stderr


def test_flat_field_level_and_sweep_frequency():
    assert np.all(patterns.line("flat", HD, level=25)[0] == 0.25)
    ln = patterns.line("sweep", HD, to_hz=20e6)[0] - patterns.BURST_PEDESTAL
    # instantaneous frequency of the linear chirp at the end of the line is to_hz
    tp = 1 / HD.pixel_clock_hz
    z = np.flatnonzero(np.sign(ln[:-1]) * np.sign(ln[1:]) < 0)
    last = np.diff(z[-6:]).mean() * 2 * tp   # period from the last zero crossings
    assert 1 / last == pytest.approx(20e6, rel=0.05)
    assert math.isclose(float(ln[0]), 0.0, abs_tol=1e-12)
