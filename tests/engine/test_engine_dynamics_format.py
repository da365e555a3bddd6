"""Dynamics figures at the chain's own video format (``check`` used 74.25 MHz always).

Reference: the exact zero-order-hold equivalent of a first-order low-pass with the output
taken at the end of each pixel, H(z) = z·(1 − a)/(z − a), a = exp(−ω_c·T) (any
discrete-time control text, from memory); its −3 dB point solves
cos θ = (1 + a² − 2·(1 − a)²)/(2a), f = θ/(2π·T).  Pixel clocks: 74.25 MHz (1080p30) and
148.5 MHz (1080p60), SMPTE ST 274.
"""

from __future__ import annotations

import math

import pytest

from livecurve.engine.dynamics import StageDynamics, figures_at_format, format_pixel_period_s


def _zoh_first_order_3db(fc_hz: float, clock_hz: float) -> float:
    t = 1.0 / clock_hz
    a = math.exp(-2 * math.pi * fc_hz * t)
    cos_t = (1 + a * a - 2 * (1 - a) ** 2) / (2 * a)
    return math.acos(cos_t) / (2 * math.pi * t)


def test_format_pixel_periods():
    assert format_pixel_period_s("1080p60") == pytest.approx(1 / 148.5e6, rel=1e-12)
    assert format_pixel_period_s("auto") == pytest.approx(1 / 74.25e6, rel=1e-12)
    assert format_pixel_period_s(None) == format_pixel_period_s("1080p30")


@pytest.mark.parametrize("fmt, clock", [("1080p30", 74.25e6), ("1080p60", 148.5e6)])
def test_bandwidth_follows_the_format(fmt, clock):
    dyn = StageDynamics(gbw_hz=60e6, noise_gain=3.0)     # closed-loop pole at 20 MHz
    fig = figures_at_format(dyn, fmt)
    assert fig["pixel_clock_hz"] == pytest.approx(clock)
    # measured: 4e-14 relative; bound 1e-9 (Brent's root tolerance is 1e-12)
    assert fig["bw_hz"] == pytest.approx(_zoh_first_order_3db(20e6, clock), rel=1e-9)
    same = figures_at_format(dyn, pixel_clock_hz=clock)
    assert same["bw_hz"] == fig["bw_hz"]


def test_the_two_formats_differ():
    dyn = StageDynamics(gbw_hz=60e6, noise_gain=3.0)
    a, b = figures_at_format(dyn, "1080p30"), figures_at_format(dyn, "1080p60")
    assert abs(a["bw_hz"] - b["bw_hz"]) > 1e5
    assert a["rise_s"] != b["rise_s"]
