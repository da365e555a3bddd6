"""Envelope follower against the analog RC step responses and scipy's discretisation."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.control.envelope import coefficient, follow
from livecurve.errors import ConfigError

RATE = 48000.0
#: Envelope agreement with closed forms, V, over ≤ 1e5 recursive steps in float64.
TOL_ENV_V = 1e-10


def test_attack_step_is_one_minus_exp():
    # Analog reference: an RC charged through τa by a unit step: y(t) = 1 − exp(−t/τa).
    # The step-invariant filter reproduces it exactly at t = (n+1)/rate (module notes).
    tau_ms = 5.0
    x = np.ones(20000)
    y, state = follow(x, rate_hz=RATE, attack_ms=tau_ms, release_ms=300.0)
    t = (np.arange(x.size) + 1) / RATE
    np.testing.assert_allclose(y, 1 - np.exp(-t / (tau_ms * 1e-3)), rtol=0, atol=TOL_ENV_V)
    assert state == y[-1]
    # 63.2 % after one time constant (common practice: 1 − 1/e)
    assert y[int(RATE * tau_ms * 1e-3) - 1] == pytest.approx(1 - np.exp(-1), abs=1e-12)


def test_release_step_is_exp():
    # Analog reference: the RC discharging through τr from 1: y(t) = exp(−t/τr).
    tau_ms = 40.0
    y, _ = follow(np.zeros(50000), rate_hz=RATE, attack_ms=1.0, release_ms=tau_ms, state=1.0)
    t = (np.arange(y.size) + 1) / RATE
    np.testing.assert_allclose(y, np.exp(-t / (tau_ms * 1e-3)), rtol=0, atol=TOL_ENV_V)


def test_negative_step_is_rectified():
    y_pos, _ = follow(np.full(3000, 0.3), rate_hz=RATE, attack_ms=2.0, release_ms=9.0)
    y_neg, _ = follow(np.full(3000, -0.3), rate_hz=RATE, attack_ms=2.0, release_ms=9.0)
    np.testing.assert_array_equal(y_pos, y_neg)


def test_attack_phase_matches_scipy_zoh_discretisation():
    # Reference tool: scipy.signal.cont2discrete((1, [τ, 1]), T, 'zoh') gives the one-pole
    # with a one-sample delay; our follower is that filter advanced by one sample.  A rising
    # input keeps the follower in attack throughout.
    tau_s = 3e-3
    x = np.linspace(0.0, 1.0, 4000) ** 2 + 0.5
    num, den, _ = scipy.signal.cont2discrete(([1.0], [tau_s, 1.0]), 1 / RATE, method="zoh")
    ref = scipy.signal.lfilter(num.ravel(), den, np.append(x, 0.0))[1:]
    y, _ = follow(x, rate_hz=RATE, attack_ms=tau_s * 1e3, release_ms=1e3)
    assert np.all(np.abs(x) >= np.concatenate([[0.0], y[:-1]]))  # stayed in attack
    np.testing.assert_allclose(y, ref, rtol=0, atol=TOL_ENV_V)


def test_release_phase_matches_scipy_zoh_discretisation():
    # Same reference for a falling input that stays below the envelope (release only).
    tau_s = 20e-3
    x = 0.2 * np.exp(-np.arange(6000) / 500.0)
    num, den, _ = scipy.signal.cont2discrete(([1.0], [tau_s, 1.0]), 1 / RATE, method="zoh")
    zi = scipy.signal.lfiltic(num.ravel(), den, y=[1.0], x=[1.0])
    ref = scipy.signal.lfilter(num.ravel(), den, np.append(x, 0.0), zi=zi)[0][1:]
    y, _ = follow(x, rate_hz=RATE, attack_ms=0.1, release_ms=tau_s * 1e3, state=1.0)
    np.testing.assert_allclose(y, ref, rtol=0, atol=TOL_ENV_V)


def test_coefficient_values():
    # a = 1 − exp(−T/τ): τ = 1 ms at 48 kHz → 1 − exp(−1/48)
    assert coefficient(1.0, 48000.0) == pytest.approx(1 - np.exp(-1 / 48), rel=1e-15)
    assert coefficient(0.0, 48000.0) == 1.0


def test_zero_time_constants_follow_the_rectified_input():
    x = np.sin(np.linspace(0, 20, 999)) * np.linspace(0, 2, 999)
    y, _ = follow(x, rate_hz=RATE, attack_ms=0.0, release_ms=0.0)
    np.testing.assert_array_equal(y, np.abs(x))


def test_blocks_with_state_equal_one_pass():
    rng = np.random.default_rng(5)
    x = rng.normal(size=30000) * np.repeat(rng.uniform(0, 1, 30), 1000)
    whole, last = follow(x, rate_hz=RATE, attack_ms=1.5, release_ms=25.0)
    parts, state = [], None
    for cut in np.split(x, [1, 777, 778, 12000, 29999]):
        y, state = follow(cut, rate_hz=RATE, attack_ms=1.5, release_ms=25.0, state=state)
        parts.append(y)
    np.testing.assert_array_equal(np.concatenate(parts), whole)
    assert state == last


def test_float32_stays_float32():
    x = np.linspace(-1, 1, 100, dtype=np.float32)
    y, _ = follow(x, rate_hz=RATE, attack_ms=1.0, release_ms=1.0)
    assert y.dtype == np.float32
    y64, _ = follow(x.astype(np.float64), rate_hz=RATE, attack_ms=1.0, release_ms=1.0)
    np.testing.assert_allclose(y, y64, rtol=1e-6)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-5, 5), min_size=1, max_size=200),
       st.floats(0, 100), st.floats(0, 100), st.floats(0, 5))
def test_envelope_stays_between_zero_and_the_peak(xs, att, rel, y0):
    # Invariant of a passive RC fed by a rectifier: it never exceeds the largest of its
    # start value and the input magnitude, and never goes negative.
    x = np.array(xs)
    y, _ = follow(x, rate_hz=RATE, attack_ms=att, release_ms=rel, state=y0)
    assert np.all(y >= 0)
    assert np.all(y <= max(y0, np.abs(x).max()) + 1e-12)


@pytest.mark.parametrize("kwargs, key", [
    ({"rate_hz": 0.0}, "rate_hz"), ({"rate_hz": float("nan")}, "rate_hz"),
    ({"attack_ms": -1.0}, "attack_ms"), ({"release_ms": float("inf")}, "release_ms"),
    ({"state": -0.1}, "state"), ({"state": float("nan")}, "state"),
])
def test_bad_settings(kwargs, key):
    args = {"rate_hz": RATE, "attack_ms": 1.0, "release_ms": 1.0, **kwargs}
    with pytest.raises(ConfigError) as err:
        follow(np.zeros(4), **args)
    assert key in str(err.value)


def test_bad_signals():
    with pytest.raises(ConfigError, match="sample 2"):
        follow([0.0, 1.0, np.nan], rate_hz=RATE, attack_ms=1.0, release_ms=1.0)
    with pytest.raises(ConfigError, match="1-D"):
        follow(np.zeros((2, 3)), rate_hz=RATE, attack_ms=1.0, release_ms=1.0)
