"""Every monitor kernel gives the same numbers on its threaded and its one-thread twin."""

from __future__ import annotations

import numba
import numpy as np
import pytest

from livecurve.monitors import draw, planes
from livecurve.monitors.alarms import level_alarms, zebra_mask
from livecurve.monitors.flash import FlashMeter
from livecurve.monitors.transfer import transfer_view
from livecurve.monitors.vectorscope import vectorscope
from livecurve.monitors.waveform import waveform

CONVERTER = np.array([[-0.4, 0.4]] * 3)


def _both(monkeypatch, fn):
    """fn() once forced onto the threaded kernels, once onto the one-thread kernels."""
    monkeypatch.setattr(planes, "PARALLEL_MIN_SAMPLES", 0)
    threaded = fn()
    monkeypatch.setattr(planes, "PARALLEL_MIN_SAMPLES", 1 << 62)
    single = fn()
    return threaded, single


@pytest.fixture(scope="module")
def frame():
    p = np.random.default_rng(61).uniform(-0.45, 0.45, (3, 45, 70)).astype(np.float32)
    p[0, 4, 4] = np.nan
    return p


def test_threshold_switches_the_kernel(monkeypatch):
    monkeypatch.setattr(planes, "PARALLEL_MIN_SAMPLES", 100)
    assert planes.use_threads(100) and not planes.use_threads(99)
    assert numba.get_num_threads() >= 1


def test_waveform(monkeypatch, frame):
    for cols in (None, 9):
        a, b = _both(monkeypatch, lambda c=cols: waveform(frame, space="ypbpr", columns=c))
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
def test_vectorscope(monkeypatch, frame, space):
    a, b = _both(monkeypatch, lambda: vectorscope(frame, space=space, standard="bt709",
                                                  size=64))
    np.testing.assert_array_equal(a, b)
    assert a.sum() > 0


def test_transfer(monkeypatch, frame):
    cin = np.linspace(-0.4, 0.4, 17)
    a, b = _both(monkeypatch, lambda: transfer_view(cin, cin, frame, bins=20))
    for name in ("counts", "below", "above", "extent_v"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_alarms_and_zebra(monkeypatch, frame):
    a, b = _both(monkeypatch, lambda: level_alarms(frame, space="rgb",
                                                   converter_limits_v=CONVERTER))
    assert a.as_dict() == b.as_dict() and a.pixels_clipped > 0
    a, b = _both(monkeypatch, lambda: zebra_mask(frame, space="rgb",
                                                 converter_limits_v=CONVERTER, phase=3))
    np.testing.assert_array_equal(a, b)


def test_flash_cells(monkeypatch, frame):
    a, b = _both(monkeypatch, lambda: FlashMeter(25, grid=(5, 7), step=1)
                 .cell_rgb_cd_m2(frame))
    np.testing.assert_array_equal(a, b)


def test_drawing(monkeypatch, frame):
    counts = waveform(frame, space="ypbpr")
    a, b = _both(monkeypatch, lambda: draw.draw_waveform(counts, space="ypbpr",
                                                         size=(120, 200)))
    np.testing.assert_array_equal(a, b)
    pic = np.zeros((45, 70, 3), np.uint8)
    mask = zebra_mask(frame, space="rgb", converter_limits_v=CONVERTER)
    a, b = _both(monkeypatch, lambda: draw.zebra_overlay(pic, mask))
    np.testing.assert_array_equal(a, b)
