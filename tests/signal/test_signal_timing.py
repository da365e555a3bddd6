"""Video raster timing (livecurve.signal.timing) against the standards' tables.

References: SMPTE ST 274 (1080-line rasters), SMPTE ST 296 (720-line), ITU-R BT.601 (13.5 MHz
SD rasters), CTA-861 timing tables (same rasters as video interface timings); the values used
here are those of /work/shared/REFERENCES.md unless marked otherwise.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.errors import ConfigError
from livecurve.signal.timing import (
    FORMATS,
    ClipTiming,
    VideoFormat,
    get_format,
    infer_format,
)

#: Relative tolerance for rates computed in float64 from exact integers.
RATE_REL = 1e-12


def test_1080p30_table():
    # SMPTE ST 274 / CTA-861 (REFERENCES.md): 2200 samples/line (1920 active), 1125 lines
    # (1080 active), 74.25 MHz pixel clock, line rate 33.75 kHz.
    f = get_format("1080p30")
    assert (f.samples_per_line, f.lines_per_frame) == (2200, 1125)
    assert (f.active_w, f.active_h) == (1920, 1080)
    assert f.pixel_clock_hz == 74.25e6
    assert f.line_rate_hz == pytest.approx(33.75e3, rel=RATE_REL)
    assert f.frame_rate == 30.0 and not f.interlaced


def test_1080p60_table():
    # SMPTE ST 274 (REFERENCES.md): 148.5 MHz, 67.5 kHz lines.
    f = get_format("1080p60")
    assert f.pixel_clock_hz == 148.5e6
    assert f.line_rate_hz == pytest.approx(67.5e3, rel=RATE_REL)
    assert f.samples_per_line == 2200 and f.lines_per_frame == 1125


def test_720p60_table():
    # SMPTE ST 296 (REFERENCES.md, 1650 from memory): 1650 samples/line, 750 lines, 74.25 MHz,
    # 45 kHz lines.
    f = get_format("720p60")
    assert (f.samples_per_line, f.lines_per_frame, f.pixel_clock_hz) == (1650, 750, 74.25e6)
    assert (f.active_w, f.active_h) == (1280, 720)
    assert f.line_rate_hz == pytest.approx(45e3, rel=RATE_REL)
    # SMPTE ST 296 720p50: 1980 samples/line at the same clock (brief; from memory).
    assert get_format("720p50").samples_per_line == 1980


def test_sd_tables():
    # ITU-R BT.601: 13.5 MHz luma sampling, 720 active samples; 525 lines × 858 samples at
    # 30/1.001 frame/s (15 734.27 Hz lines) and 625 lines × 864 samples at 25 frame/s
    # (15 625 Hz lines), both interlaced.
    ntsc, pal = get_format("480i"), get_format("576i")
    assert (ntsc.samples_per_line, ntsc.lines_per_frame, ntsc.pixel_clock_hz) == (858, 525, 13.5e6)
    assert (pal.samples_per_line, pal.lines_per_frame, pal.pixel_clock_hz) == (864, 625, 13.5e6)
    assert ntsc.frame_rate == pytest.approx(30000 / 1001, rel=RATE_REL)
    assert pal.frame_rate == 25.0
    assert ntsc.line_rate_hz == pytest.approx(15734.265734, rel=1e-9)
    assert pal.line_rate_hz == 15625.0
    assert ntsc.interlaced and pal.interlaced
    assert (ntsc.active_w, ntsc.active_h, pal.active_w, pal.active_h) == (720, 480, 720, 576)
    assert ntsc.field_rate_hz == pytest.approx(60000 / 1001, rel=RATE_REL)


def test_hd_totals_per_rate():
    # SMPTE ST 274: 2640 samples/line at 25 and 50 frame/s, 2750 at 24; the /1.001 rates use
    # the same totals with a 74.25/1.001 (148.5/1.001) MHz clock.
    assert get_format("1080p25").samples_per_line == 2640
    assert get_format("1080p50").samples_per_line == 2640
    assert get_format("1080p24").samples_per_line == 2750
    assert get_format("1080p23.98").pixel_clock_hz == pytest.approx(74.25e6 / 1.001,
                                                                     rel=RATE_REL)
    assert get_format("1080p59.94").pixel_clock_hz == pytest.approx(148.5e6 / 1.001,
                                                                    rel=RATE_REL)
    # Interlaced names carry the field rate (ST 274 system nomenclature, from memory).
    assert get_format("1080i50").frame_rate == 25.0
    assert get_format("1080i50").field_rate_hz == 50.0
    assert get_format("1080i59.94").frame_rate == pytest.approx(30000 / 1001, rel=RATE_REL)


@pytest.mark.parametrize("name", sorted(FORMATS))
def test_every_format_is_self_consistent(name):
    # Invariant of any raster: pixel clock = samples/line × lines/frame × frame rate, and the
    # active area plus its blanking fits the totals.
    f = FORMATS[name]
    assert f.name == name
    assert f.samples_per_line * f.lines_per_frame * f.frame_rate == pytest.approx(
        f.pixel_clock_hz, rel=RATE_REL)
    assert f.active_start_sample + f.active_w <= f.samples_per_line
    assert f.h_blank_samples == f.samples_per_line - f.active_w
    assert f.line_period_s == pytest.approx(1 / f.line_rate_hz, rel=RATE_REL)
    assert f.pixel_period_s * f.samples_per_line == pytest.approx(f.line_period_s, rel=RATE_REL)


def test_blanking_positions():
    # 0H to first active sample: 192 (1080-line), 260 (720-line) — CTA-861 sync + back porch;
    # 122 (525) and 132 (625) — BT.601 (from memory).  First active lines: 1080p 42, 1080i 21
    # and 584 (ST 274), 720p 26 (ST 296), 576i 23 and 336 (BT.656), 480i 22 and 285 (from
    # memory).
    assert get_format("1080p30").active_start_sample == 192
    assert get_format("720p50").active_start_sample == 260
    assert get_format("480i").active_start_sample == 122
    assert get_format("576i").active_start_sample == 132
    assert get_format("1080p25").first_active_line == 42
    i = get_format("1080i60")
    assert (i.first_active_line, i.second_field_first_line) == (21, 584)
    p = get_format("576i")
    assert (p.first_active_line, p.second_field_first_line) == (23, 336)
    # Each field holds half the active lines inside the raster.
    for f in FORMATS.values():
        if f.interlaced:
            assert f.second_field_first_line - f.first_active_line >= f.active_h // 2
            assert f.second_field_first_line + f.active_h // 2 - 1 <= f.lines_per_frame


def test_audio_samples_per_line():
    # REFERENCES.md: 48 kHz audio ≈ 1.42 samples per 1080p30 line (derived from the two rates).
    assert 48e3 / get_format("1080p30").line_rate_hz == pytest.approx(1.42, abs=0.005)


def test_get_format_unknown_lists_names():
    with pytest.raises(ConfigError) as err:
        get_format("1080x60")
    msg = str(err.value)
    assert "1080x60" in msg and "1080p30" in msg and "576i" in msg
    assert get_format(" 1080P30 ") is FORMATS["1080p30"]


def test_inconsistent_format_is_rejected():
    # A raster whose clock does not equal samples × lines × rate cannot exist.
    with pytest.raises(ConfigError, match="pixel clock"):
        VideoFormat(name="odd", active_w=1920, active_h=1080, samples_per_line=2200,
                    lines_per_frame=1125, pixel_clock_hz=74.25e6, frame_rate=25.0,
                    interlaced=False, active_start_sample=192, first_active_line=42)
    with pytest.raises(ConfigError, match="active"):
        VideoFormat(name="wide", active_w=2100, active_h=1080, samples_per_line=2200,
                    lines_per_frame=1125, pixel_clock_hz=74.25e6, frame_rate=30.0,
                    interlaced=False, active_start_sample=192, first_active_line=42)
    with pytest.raises(ConfigError, match="first_active_line"):
        VideoFormat(name="tall", active_w=1920, active_h=1080, samples_per_line=2200,
                    lines_per_frame=1125, pixel_clock_hz=74.25e6, frame_rate=30.0,
                    interlaced=False, active_start_sample=192, first_active_line=60)


@pytest.mark.parametrize("w,h,fps,expected", [
    (1920, 1080, 30, "1080p30"),
    (1920, 1080, 29.97, "1080p29.97"),       # container rate as written
    (1920, 1080, 30000 / 1001, "1080p29.97"),
    (1920, 1080, 23.976, "1080p23.98"),
    (1920, 1080, 25, "1080p25"),             # ties with 1080i50: progressive preferred
    (1280, 720, 59.94, "720p59.94"),
    (1280, 720, 50, "720p50"),
    (960, 540, 60, "720p60"),                # |720 − 540| = 180 < |1080 − 540| = 540
    (720, 576, 25, "576i"),
    (720, 480, 29.97, "480i"),
    (3840, 2160, 24, "1080p24"),
    (640, 360, 30, "720p30"),
])
def test_infer_format(w, h, fps, expected):
    # Rule (infer_format docstring): matching frame rate, then closest active height, then
    # progressive before interlaced.
    assert infer_format(w, h, fps).name == expected


def test_infer_format_rejects_unknown_rates():
    with pytest.raises(ConfigError, match="frame rate") as err:
        infer_format(1920, 1080, 15)
    assert "29.97" in str(err.value)
    for bad in (0, -25, float("nan"), "fast"):
        with pytest.raises(ConfigError):
            infer_format(1920, 1080, bad)
    with pytest.raises(ConfigError, match="width"):
        infer_format(0, 1080, 25)


# --------------------------------------------------------------------------- clip timing


def test_clip_timing_native_progressive():
    f = get_format("1080p30")
    t = ClipTiming(f, 1920, 1080)
    rows = t.row_time_s(0)
    assert rows.shape == (1080,) and rows.dtype == np.float64
    # Row 0 is raster line 42 (ST 274 progressive): 41 line periods after the frame start.
    assert rows[0] == pytest.approx(41 * f.line_period_s, rel=RATE_REL)
    np.testing.assert_allclose(np.diff(rows), f.line_period_s, rtol=1e-9)
    # Frame k starts at k / frame rate.
    np.testing.assert_allclose(t.row_time_s(30) - rows, 1.0, rtol=0, atol=1e-12)
    cols = t.column_offset_s
    assert cols.shape == (1920,)
    assert cols[0] == pytest.approx(192 / 74.25e6, rel=RATE_REL)
    np.testing.assert_allclose(np.diff(cols), 1 / 74.25e6, rtol=1e-9)
    assert t.pixel_period_s == pytest.approx(1 / 74.25e6, rel=RATE_REL)
    assert t.blank_samples == 192
    # The last active sample ends before the line does (front porch follows).
    assert cols[-1] + t.pixel_period_s <= f.line_period_s
    # The last row of a frame starts before the next frame.
    assert rows[-1] + f.line_period_s <= 1 / f.frame_rate


def test_clip_timing_scaled_clip():
    # A 960 × 540 clip on 1080p60: each clip row spans two raster lines and starts on the even
    # picture line; each column spans two samples.
    f = get_format("1080p60")
    t = ClipTiming(f, 960, 540)
    np.testing.assert_array_equal(t.lines, 42 + 2 * np.arange(540))
    np.testing.assert_allclose(np.diff(t.row_time_s(3)), 2 * f.line_period_s, rtol=1e-9)
    assert t.pixel_period_s == pytest.approx(2 / 148.5e6, rel=RATE_REL)
    assert t.blank_samples == 96
    np.testing.assert_allclose(np.diff(t.column_offset_s), 2 / 148.5e6, rtol=1e-9)
    # A clip finer than the raster (4K rows on 1080 lines): two rows share each line.
    t4 = ClipTiming("1080p24", 3840, 2160)
    np.testing.assert_array_equal(t4.lines[:4], [42, 42, 43, 43])


def test_clip_timing_interlaced_field_order():
    # 1080i50: picture lines alternate fields; field 1 (lines 21…560) is scanned first, field
    # 2 (584…1123) 563 lines later (ST 274 line numbers).
    f = get_format("1080i50")
    t = ClipTiming(f, 1920, 1080)
    np.testing.assert_array_equal(t.lines[:4], [21, 584, 22, 585])
    np.testing.assert_array_equal(t.lines[-2:], [560, 1123])
    rows = t.row_time_s(0)
    assert rows[1] - rows[0] == pytest.approx(563 * f.line_period_s, rel=1e-12)
    # Rows of one field are one line apart; the second field lags by about half a frame.
    np.testing.assert_allclose(np.diff(rows[0::2]), f.line_period_s, rtol=1e-9)
    assert (rows[1] - rows[0]) * f.frame_rate == pytest.approx(0.5, abs=0.01)
    # Bottom field first swaps which picture lines are scanned first.
    b = ClipTiming(f, 1920, 1080, top_field_first=False)
    np.testing.assert_array_equal(b.lines[:4], [584, 21, 585, 22])
    # Every row time lies inside its frame.
    assert rows.min() >= 0 and rows.max() + f.line_period_s <= 1 / f.frame_rate


def test_clip_timing_576i():
    # BT.656 625-line numbering: field 1 active from line 23, field 2 from line 336.
    t = ClipTiming("576i", 720, 576)
    np.testing.assert_array_equal(t.lines[:4], [23, 336, 24, 337])
    assert t.blank_samples == 132
    assert t.pixel_period_s == pytest.approx(1 / 13.5e6, rel=RATE_REL)


def test_clip_timing_bad_input():
    with pytest.raises(ConfigError, match="height"):
        ClipTiming("1080p30", 1920, 0)
    with pytest.raises(ConfigError, match="width"):
        ClipTiming("1080p30", 19.5, 1080)
    with pytest.raises(ConfigError, match="format"):
        ClipTiming(object(), 1920, 1080)
    with pytest.raises(ConfigError, match="format"):
        ClipTiming("2160p60", 1920, 1080)
    t = ClipTiming("720p50", 1280, 720)
    for bad in (-1, 1.5, True):
        with pytest.raises(ConfigError, match="frame_index"):
            t.row_time_s(bad)
