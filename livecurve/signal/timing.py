"""Video raster timing: SMPTE ST 274 (1080 lines), SMPTE ST 296 (720 lines), ITU-R BT.601 (SD).

Every pixel the engine processes has a time, so control sources and temperatures can be
sampled where the picture is.  A :class:`VideoFormat` holds a raster's totals, clock and where
active video sits in it; :class:`ClipTiming` maps a clip's pixel grid onto that active area.

Sources
-------
* SMPTE ST 274: 1920×1080 active, 1125 total lines; 74.25 MHz (148.5 MHz for 50/60 frame/s
  progressive), divided by 1.001 for the 23.98/29.97/59.94 rates.  Total samples per line:
  2200 at 30/60, 2640 at 25/50, 2750 at 24.  Interlaced systems are named by field rate
  (1080i50 = 25 frames/s), as in the standard's system nomenclature (from memory) and the trade.
* SMPTE ST 296: 1280×720 active, 750 total lines at 74.25 MHz; 1650 samples/line at 60, 1980
  at 50.  ST 296 also lists 24/25/30 frame/s (from memory); their totals (4125, 3960, 3300)
  follow from 74.25 MHz and 750 lines.
* ITU-R BT.601: 13.5 MHz luma sampling, 720 active samples; 858 samples × 525 lines at
  30/1.001 frame/s (480 active lines used here), 864 × 625 at 25 frame/s (576 active).
* Where active video starts: samples from the line's timing reference (0H) to the first
  active sample — 192 for 1080-line, 260 for 720-line (CEA-861 timing tables: sync + back
  porch), 122 for 525-line and 132 for 625-line (BT.601, from memory; CEA-861's 720×480p and
  720×576 tables agree).  First active lines: 1080p line 42, 1080i lines 21 and 584 (ST 274),
  720p line 26 (ST 296), 576i lines 23 and 336 (BT.656), 480i lines 22 and 285 (the 480-line
  picture of CEA-861 inside the 525-line raster; from memory).

Time convention: frame *k* starts at k / frame_rate at the timing reference of its line 1;
line *n* (1-based, the standard's numbering) starts (n − 1) line periods later; a sample *s*
of a line (0 = timing reference) is s pixel periods after the line start.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from livecurve.errors import ConfigError

#: Relative tolerance on frame rates in :func:`infer_format`: half the 1000/1001 gap, so 30 and
#: 29.97 stay apart while a container's "29.97" or "23.976" matches 30000/1001 or 24000/1001.
FPS_REL_TOL = 0.5 * (1.0 - 1000.0 / 1001.0)


@dataclass(frozen=True)
class VideoFormat:
    """One standard raster.

    Attributes
    ----------
    name : str
        Key in :data:`FORMATS`, e.g. ``"1080p30"``, ``"1080i50"`` (interlaced: field rate).
    active_w, active_h : int
        Active samples per line and active lines per frame.
    samples_per_line, lines_per_frame : int
        Totals including blanking.
    pixel_clock_hz : float
        Luma sampling frequency, Hz.
    frame_rate : float
        Frames per second (not fields).
    interlaced : bool
        Two fields per frame.
    active_start_sample : int
        Samples from the line's timing reference (0H) to the first active sample: the
        horizontal blanking before active video (sync and back porch).
    first_active_line : int
        1-based line number of the first active line (of the first field when interlaced).
    second_field_first_line : int
        1-based line number of the second field's first active line; 0 for progressive.
    """

    name: str
    active_w: int
    active_h: int
    samples_per_line: int
    lines_per_frame: int
    pixel_clock_hz: float
    frame_rate: float
    interlaced: bool
    active_start_sample: int
    first_active_line: int
    second_field_first_line: int = 0

    def __post_init__(self) -> None:
        ints = ("active_w", "active_h", "samples_per_line", "lines_per_frame",
                "active_start_sample", "first_active_line", "second_field_first_line")
        for k in ints:
            v = getattr(self, k)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 0:
                raise ConfigError("must be a non-negative integer", key=f"{self.name}.{k}",
                                  value=v)
        for k in ("pixel_clock_hz", "frame_rate"):
            v = getattr(self, k)
            if not isinstance(v, (int, float)) or not math.isfinite(v) or v <= 0:
                raise ConfigError("must be a positive number", key=f"{self.name}.{k}", value=v)
        if self.active_w == 0 or self.active_h == 0 \
                or self.active_start_sample + self.active_w > self.samples_per_line:
            raise ConfigError(f"active samples {self.active_start_sample}+{self.active_w} do "
                              f"not fit {self.samples_per_line} samples per line",
                              key=f"{self.name}.active_w", value=self.active_w)
        clock = self.samples_per_line * self.lines_per_frame * self.frame_rate
        if abs(clock - self.pixel_clock_hz) > 1e-9 * self.pixel_clock_hz:
            raise ConfigError(f"samples × lines × frame rate = {clock:.6f} Hz differs from the "
                              "pixel clock", key=f"{self.name}.pixel_clock_hz",
                              value=self.pixel_clock_hz)
        if self.interlaced:
            field_h = self.active_h // 2
            ok = (self.active_h % 2 == 0 and self.first_active_line >= 1
                  and self.first_active_line + field_h <= self.second_field_first_line
                  and self.second_field_first_line + field_h - 1 <= self.lines_per_frame)
        else:
            ok = (self.first_active_line >= 1 and self.second_field_first_line == 0
                  and self.first_active_line + self.active_h - 1 <= self.lines_per_frame)
        if not ok:
            raise ConfigError(f"{self.active_h} active lines from line {self.first_active_line}"
                              f" (second field {self.second_field_first_line}) do not fit "
                              f"{self.lines_per_frame} lines",
                              key=f"{self.name}.first_active_line",
                              value=self.first_active_line)

    @property
    def line_rate_hz(self) -> float:
        """Lines per second, pixel clock / samples per line (33.75 kHz for 1080p30)."""
        return self.pixel_clock_hz / self.samples_per_line

    @property
    def line_period_s(self) -> float:
        """Seconds per line (including blanking)."""
        return self.samples_per_line / self.pixel_clock_hz

    @property
    def pixel_period_s(self) -> float:
        """Seconds per sample, 1 / pixel clock."""
        return 1.0 / self.pixel_clock_hz

    @property
    def field_rate_hz(self) -> float:
        """Fields per second: twice the frame rate when interlaced, else the frame rate."""
        return self.frame_rate * (2 if self.interlaced else 1)

    @property
    def h_blank_samples(self) -> int:
        """Whole horizontal blanking interval (front porch + sync + back porch), samples."""
        return self.samples_per_line - self.active_w


def _hd(name, w, h, spl, lpf, clock, rate, interlaced, start, first, second=0):
    return VideoFormat(name=name, active_w=w, active_h=h, samples_per_line=spl,
                       lines_per_frame=lpf, pixel_clock_hz=clock, frame_rate=rate,
                       interlaced=interlaced, active_start_sample=start,
                       first_active_line=first, second_field_first_line=second)


def _build_formats() -> dict[str, VideoFormat]:
    f = {}
    ntsc = 1000.0 / 1001.0
    # SMPTE ST 274: 1920×1080 in 1125 lines.  (name, samples/line, clock Hz, frame rate)
    for name, spl, clock, rate in (
        ("1080p23.98", 2750, 74.25e6 * ntsc, 24.0 * ntsc),
        ("1080p24", 2750, 74.25e6, 24.0),
        ("1080p25", 2640, 74.25e6, 25.0),
        ("1080p29.97", 2200, 74.25e6 * ntsc, 30.0 * ntsc),
        ("1080p30", 2200, 74.25e6, 30.0),
        ("1080p50", 2640, 148.5e6, 50.0),
        ("1080p59.94", 2200, 148.5e6 * ntsc, 60.0 * ntsc),
        ("1080p60", 2200, 148.5e6, 60.0),
    ):
        f[name] = _hd(name, 1920, 1080, spl, 1125, clock, rate, False, 192, 42)
    for name, spl, clock, rate in (
        ("1080i50", 2640, 74.25e6, 25.0),
        ("1080i59.94", 2200, 74.25e6 * ntsc, 30.0 * ntsc),
        ("1080i60", 2200, 74.25e6, 30.0),
    ):
        f[name] = _hd(name, 1920, 1080, spl, 1125, clock, rate, True, 192, 21, 584)
    # SMPTE ST 296: 1280×720 in 750 lines at 74.25 MHz (or /1.001).
    for name, spl, clock, rate in (
        ("720p23.98", 4125, 74.25e6 * ntsc, 24.0 * ntsc),
        ("720p24", 4125, 74.25e6, 24.0),
        ("720p25", 3960, 74.25e6, 25.0),
        ("720p29.97", 3300, 74.25e6 * ntsc, 30.0 * ntsc),
        ("720p30", 3300, 74.25e6, 30.0),
        ("720p50", 1980, 74.25e6, 50.0),
        ("720p59.94", 1650, 74.25e6 * ntsc, 60.0 * ntsc),
        ("720p60", 1650, 74.25e6, 60.0),
    ):
        f[name] = _hd(name, 1280, 720, spl, 750, clock, rate, False, 260, 26)
    # ITU-R BT.601: 13.5 MHz sampling, 720 active samples.
    f["480i"] = _hd("480i", 720, 480, 858, 525, 13.5e6, 30.0 * ntsc, True, 122, 22, 285)
    f["576i"] = _hd("576i", 720, 576, 864, 625, 13.5e6, 25.0, True, 132, 23, 336)
    return f


#: Standard formats by name.
FORMATS: dict[str, VideoFormat] = _build_formats()


def get_format(name: str) -> VideoFormat:
    """The standard format called *name* (see :data:`FORMATS`).

    Raises
    ------
    ConfigError
        Unknown name; the message lists the known ones.
    """
    key = str(name).strip().lower()
    if key not in FORMATS:
        raise ConfigError(f"unknown video format; known: {', '.join(FORMATS)}",
                          key="format", value=name)
    return FORMATS[key]


def infer_format(width: int, height: int, fps: float) -> VideoFormat:
    """The standard format a clip of *width* × *height* at *fps* frames/s most likely rides on.

    Rule: keep the formats whose frame rate (frames, not fields) is within
    :data:`FPS_REL_TOL` (0.05 %) of *fps*; among them take the one whose active height is
    closest to *height*; on a tie prefer progressive (a decoded clip holds whole frames), then
    the closest active width, then the larger raster.

    Raises
    ------
    ConfigError
        Non-positive size or rate, or no standard format at this frame rate (the message
        lists the standard rates; choose a format by name with :func:`get_format`).
    """
    for k, v in (("width", width), ("height", height)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v <= 0:
            raise ConfigError("must be a positive integer", key=k, value=v)
    try:
        rate = float(fps)
    except (TypeError, ValueError) as exc:
        raise ConfigError("frame rate must be a number", key="fps", value=fps) from exc
    if not math.isfinite(rate) or rate <= 0:
        raise ConfigError("frame rate must be positive", key="fps", value=fps)
    cands = [f for f in FORMATS.values() if abs(f.frame_rate - rate) <= FPS_REL_TOL * f.frame_rate]
    if not cands:
        rates = sorted({round(f.frame_rate, 3) for f in FORMATS.values()})
        raise ConfigError(f"no standard format runs at this frame rate (standard rates: "
                          f"{', '.join(f'{r:g}' for r in rates)} frames/s); choose a format by "
                          "name", key="fps", value=fps)
    return min(cands, key=lambda f: (abs(f.active_h - height), f.interlaced,
                                     abs(f.active_w - width), -f.active_h))


class ClipTiming:
    """Times of a clip's rows and columns when its frames are carried by a video format.

    The clip is stretched over the format's active area.  Clip row *i* spans active_h/height
    picture lines and takes the time of the picture line it starts on, p = ⌊i·active_h/height⌋
    (0 = top of the picture).  Progressive: picture line p is line first_active_line + p.
    Interlaced: the field carrying the top picture line is scanned first by default
    (``top_field_first=True``; 1080i and 576i are top field first by their first active
    lines; 480-line material, e.g. from DV, is often bottom field first — common practice,
    from memory); picture line p lies in the first field when p has the parity of that
    field, at field line ⌊p/2⌋, i.e. line first_active_line + ⌊p/2⌋, otherwise on line
    second_field_first_line + ⌊p/2⌋.  Clip column *x* sits at active sample x·active_w/width.

    Parameters
    ----------
    fmt : VideoFormat or str
        The carrying format (a name is looked up with :func:`get_format`).
    width, height : int
        Clip size in pixels.
    top_field_first : bool, keyword-only
        Interlaced field order (ignored for progressive formats).
    """

    def __init__(self, fmt: VideoFormat | str, width: int, height: int, *,
                 top_field_first: bool = True):
        self.fmt = get_format(fmt) if isinstance(fmt, str) else fmt
        if not isinstance(self.fmt, VideoFormat):
            raise ConfigError("expected a VideoFormat or a format name", key="format",
                              value=fmt)
        for k, v in (("width", width), ("height", height)):
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v <= 0:
                raise ConfigError("must be a positive integer", key=k, value=v)
        self.width, self.height = int(width), int(height)
        self.top_field_first = bool(top_field_first)
        f = self.fmt
        p = (np.arange(self.height, dtype=np.int64) * f.active_h) // self.height
        if f.interlaced:
            first_parity = 0 if self.top_field_first else 1
            line = np.where(p % 2 == first_parity, f.first_active_line + p // 2,
                            f.second_field_first_line + p // 2)
        else:
            line = f.first_active_line + p
        #: 1-based raster line each clip row is sampled on, shape (height,).
        self.lines = line
        self.lines.flags.writeable = False
        self._row_offset_s = (line - 1).astype(np.float64) * f.line_period_s
        x = np.arange(self.width, dtype=np.float64) * (f.active_w / self.width)
        self._col_offset_s = (f.active_start_sample + x) / f.pixel_clock_hz
        self._col_offset_s.flags.writeable = False

    def frame_start_s(self, frame_index: int) -> float:
        """Start of frame *frame_index* (0-based): frame_index / frame_rate, seconds."""
        if isinstance(frame_index, bool) or not isinstance(frame_index, (int, np.integer)) \
                or frame_index < 0:
            raise ConfigError("frame index must be a non-negative integer", key="frame_index",
                              value=frame_index)
        return int(frame_index) / self.fmt.frame_rate

    def row_time_s(self, frame_index: int) -> np.ndarray:
        """Start time of the raster line carrying each clip row of frame *frame_index*.

        Returns
        -------
        ndarray, shape (height,), float64
            Seconds from the clip's start (line timing reference, 0H).
        """
        return self.frame_start_s(frame_index) + self._row_offset_s

    @property
    def column_offset_s(self) -> np.ndarray:
        """Time of each clip column after its row's start (includes the blanking before active
        video), shape (width,), float64, seconds; read-only."""
        return self._col_offset_s

    @property
    def pixel_period_s(self) -> float:
        """Seconds per clip column: active_w / (width · pixel clock)."""
        return self.fmt.active_w / (self.width * self.fmt.pixel_clock_hz)

    @property
    def blank_samples(self) -> int:
        """Horizontal blanking before active video (0H to first active sample) in clip columns,
        rounded to the nearest whole column."""
        return int(round(self.fmt.active_start_sample * self.width / self.fmt.active_w))
