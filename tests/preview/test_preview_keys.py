"""Key bindings of the preview window and the slider scale of live parameters."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.errors import ConfigError
from livecurve.preview.keys import (
    BINDINGS,
    COARSE_STEPS,
    FINE_STEPS,
    LOG_RATIO,
    SLIDER_MAX,
    KnobScale,
    action_for,
    help_lines,
)

REL = 1e-12  # float64 round-off of the slider mapping


def test_every_key_code_is_bound_once():
    codes = [k for b in BINDINGS for k in b.keys]
    assert len(codes) == len(set(codes))
    assert len({b.action for b in BINDINGS}) == len(BINDINGS)


@pytest.mark.parametrize("char, action", [
    (" ", "pause"), ("n", "step"), ("l", "loop"), ("b", "bypass"), ("s", "split"),
    ("1", "waveform"), ("2", "vectorscope"), ("3", "transfer"), ("4", "alarms"),
    ("z", "zebra"), ("]", "next_knob"), ("[", "prev_knob"), ("=", "coarse_up"),
    ("+", "coarse_up"), ("-", "coarse_down"), (".", "fine_up"), (",", "fine_down"),
    ("r", "reset"), ("p", "snapshot"), ("h", "help"), ("?", "help"), ("q", "quit"),
])
def test_character_keys(char, action):
    assert action_for(ord(char)) == action


def test_escape_quits_and_nothing_pressed_is_none():
    assert action_for(27) == "quit"
    assert action_for(-1) is None
    assert action_for(ord("x")) is None


def test_arrow_keys_are_x11_keysyms():
    # X11 keysyms from the X Window System's keysymdef.h: XK_Left 0xff51, XK_Up 0xff52,
    # XK_Right 0xff53, XK_Down 0xff54 (what OpenCV's Qt backend returns on Linux).
    assert action_for(0xFF51) == "fine_down"
    assert action_for(0xFF52) == "coarse_up"
    assert action_for(0xFF53) == "fine_up"
    assert action_for(0xFF54) == "coarse_down"


def test_modifier_keys_alone_are_ignored():
    # keysymdef.h: XK_Shift_L 0xffe1 … XK_Hyper_R 0xffee
    for code in range(0xFFE1, 0xFFEF):
        assert action_for(code) is None


def test_modifier_flags_above_the_key_are_dropped():
    assert action_for((1 << 16) | ord("b")) == "bypass"


def test_help_lists_every_binding():
    lines = help_lines()
    assert len(lines) == len(BINDINGS)
    for line, b in zip(lines, BINDINGS, strict=True):
        assert line.startswith(b.label) and b.text in line


def test_linear_scale_ends_and_middle():
    s = KnobScale(0.93, 1.0)
    assert not s.log
    assert s.to_value(0) == 0.93 and s.to_value(SLIDER_MAX) == 1.0
    assert math.isclose(s.to_value(SLIDER_MAX / 2), 0.965, rel_tol=REL)
    assert math.isclose(s.to_pos(0.965), SLIDER_MAX / 2, rel_tol=REL)


def test_log_scale_middle_is_the_geometric_mean():
    # On a logarithmic scale the half-way point is sqrt(lo·hi) (definition of a log scale).
    s = KnobScale(100.0, 20e3)
    assert s.log
    assert math.isclose(s.to_value(SLIDER_MAX / 2), math.sqrt(100.0 * 20e3), rel_tol=REL)
    assert s.to_value(0) == pytest.approx(100.0, rel=REL)
    assert s.to_value(SLIDER_MAX) == pytest.approx(20e3, rel=REL)


def test_log_only_above_the_ratio():
    assert not KnobScale(1.0, LOG_RATIO).log          # exactly 10: linear
    assert KnobScale(1.0, LOG_RATIO * 1.001).log
    assert not KnobScale(-1.0, 100.0).log             # not positive: linear
    assert not KnobScale(0.0, 100.0).log


@settings(max_examples=200, deadline=None)
@given(st.floats(1e-9, 1e3), st.floats(1.001, 1e4), st.floats(0.0, 1.0))
def test_round_trip_and_equal_ratios(lo, ratio, u):
    s = KnobScale(lo, lo * ratio)
    v = s.to_value(u * SLIDER_MAX)
    assert s.lo * (1 - 1e-12) <= v <= s.hi * (1 + 1e-12)
    assert math.isclose(s.to_pos(v), u * SLIDER_MAX, rel_tol=1e-9, abs_tol=1e-9)
    if s.log:  # equal ratio per slider step, wherever on the slider
        p = int(u * (SLIDER_MAX - 1))
        r = s.to_value(p + 1) / s.to_value(p)
        assert math.isclose(r, ratio ** (1 / SLIDER_MAX), rel_tol=1e-9)


def test_steps_move_whole_positions_and_clamp():
    s = KnobScale(45e-6, 200e-6)
    v = s.step(60e-6, COARSE_STEPS)
    assert math.isclose(s.to_pos(v), round(s.to_pos(60e-6)) + COARSE_STEPS, abs_tol=1e-9)
    v2 = s.step(v, -FINE_STEPS)
    assert math.isclose(s.to_pos(v2), s.to_pos(v) - FINE_STEPS, abs_tol=1e-9)
    assert s.step(s.hi, 10) == s.hi
    assert s.step(s.lo, -10) == s.lo


def test_out_of_range_values_clamp():
    s = KnobScale(1.0, 2.0)
    assert s.to_pos(5.0) == SLIDER_MAX and s.to_pos(-5.0) == 0
    assert s.to_value(2 * SLIDER_MAX) == 2.0 and s.to_value(-3) == 1.0


@pytest.mark.parametrize("lo, hi", [(1.0, 1.0), (2.0, 1.0), (float("nan"), 1.0),
                                    (0.0, float("inf"))])
def test_bad_range_is_refused(lo, hi):
    with pytest.raises(ConfigError, match="range"):
        KnobScale(lo, hi)

