"""What a picture source holds: size, rate, frame count, audio, colour matrix, bit depth.

Three kinds of file source are recognised from the spec a user gives:

``clip``
    any container/codec the bundled ffmpeg reads (MP4, MOV, MKV, AVI, Y4M, ...).
``still``
    one image read by OpenCV: PNG, TIFF, JPEG, BMP, WebP (8- or 16-bit).
``sequence``
    numbered stills given as a printf pattern (``shots/shot_%04d.png``) or a glob
    (``shots/*.png``); a sequence carries no frame rate, so one is supplied
    (``sequence_fps``, default 30 Hz).

For clips the facts come from ffmpeg's stream description; the frame count is
exact when it is cheap (the video packets are counted by a stream copy into the
null muxer, which reads but does not decode: about one second per gigabyte here)
and estimated from duration × rate otherwise, flagged by ``n_frames_exact``.

Colour matrix hint: the stream's ``matrix_coefficients`` tag (ITU-T H.273 /
ISO/IEC 23091-2 code points as ffmpeg names them) is mapped to the three ITU-R
recommendations: ``bt470bg``/``smpte170m`` → BT.601, ``bt709`` → BT.709,
``bt2020nc``/``bt2020c`` → BT.2020; anything else (untagged, RGB) gives ``None``.

Damaged input is reported as :class:`~livecurve.errors.MediaError` naming the path:
missing, empty, unreadable, not a picture, no video stream, zero frames, or
truncated (ffmpeg's demuxer reports a partial file, or fewer packets than the
stream's own recorded duration promises).
"""

from __future__ import annotations

import dataclasses
import glob
import math
import os
import re
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np

from livecurve.errors import MediaError
from livecurve.media import _ffmpeg

#: File name endings read as stills (OpenCV decoders present in the opencv-python wheel).
STILL_EXTENSIONS = (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp", ".webp")

#: Default rate given to stills and image sequences, which carry none (Hz).
DEFAULT_SEQUENCE_FPS = 30.0

#: Clips whose container duration is at most this long get an exact frame count (s).
COUNT_LIMIT_S = 1800.0

_MATRIX = {"bt709": "bt709", "bt470bg": "bt601", "smpte170m": "bt601",
           "bt2020nc": "bt2020", "bt2020c": "bt2020"}

_TRUNCATION_MARKS = ("partial file", "ended prematurely", "truncat", "packet corrupt",
                     "corrupt input packet", "invalid nal unit size", "moov atom not found")

_PRINTF = re.compile(r"%(0?)(\d*)d")


@dataclasses.dataclass(frozen=True)
class MediaInfo:
    """Facts about one picture source.

    Attributes
    ----------
    path : str
        The spec as given (file path, sequence pattern, or ``"camera N"``).
    kind : str
        ``'clip'``, ``'still'``, ``'sequence'`` or ``'camera'``.
    width, height : int
        Picture size in pixels.
    fps : float
        Frame rate in Hz (supplied for stills and sequences).
    n_frames : int or None
        Frame count; None for a camera.
    n_frames_exact : bool
        False when *n_frames* is an estimate (duration × rate).
    duration_s : float or None
        n_frames / fps for clips and sequences (s); None for a camera.
    has_audio : bool
        The clip carries at least one audio stream.
    audio_rate : int or None
        Sample rate of the first audio stream (Hz).
    colour_matrix : str or None
        ``'bt601'``, ``'bt709'``, ``'bt2020'`` from the stream's tags, or None.
    source_bits : int
        Bits per component of the stored pictures (8, 10, 12, 16).
    pix_fmt : str or None
        ffmpeg's pixel format name for clips (``yuv420p``, ``gbrp16le``, ...).
    colour_range : str or None
        ``'tv'`` (limited) or ``'pc'`` (full) when the stream says so.
    codec : str or None
        Video codec name for clips.
    files : tuple of str
        The frames of a sequence, in order (empty otherwise).
    """

    path: str
    kind: str
    width: int
    height: int
    fps: float
    n_frames: int | None
    n_frames_exact: bool
    duration_s: float | None
    has_audio: bool
    audio_rate: int | None
    colour_matrix: str | None
    source_bits: int
    pix_fmt: str | None = None
    colour_range: str | None = None
    codec: str | None = None
    files: tuple[str, ...] = ()

    @property
    def fps_fraction(self) -> Fraction:
        """The frame rate as an exact fraction (1000/1001 rates restored)."""
        return _ffmpeg.exact_rate(self.fps)


def probe(spec, *, sequence_fps: float = DEFAULT_SEQUENCE_FPS,
          count_frames: bool | None = None) -> MediaInfo:
    """Describe a clip, still or image sequence.

    Parameters
    ----------
    spec : str or os.PathLike
        A file, or a printf pattern / glob naming an image sequence.
    sequence_fps : float, keyword-only
        Rate given to stills and sequences (Hz).
    count_frames : bool or None, keyword-only
        Count a clip's frames exactly (True), estimate them (False), or decide from the
        duration (None: count up to :data:`COUNT_LIMIT_S`).

    Returns
    -------
    MediaInfo

    Raises
    ------
    MediaError
        The source is missing, empty, unreadable, damaged, truncated or has no frames.
    """
    kind, files = classify(spec)
    if kind == "clip":
        return _probe_clip(files[0], count_frames=count_frames)
    fps = _check_fps(sequence_fps, spec)
    first = read_image(files[0])
    h, w = first.shape[:2]
    n = len(files)
    return MediaInfo(path=str(spec), kind=kind, width=w, height=h, fps=fps, n_frames=n,
                     n_frames_exact=True, duration_s=n / fps, has_audio=False,
                     audio_rate=None, colour_matrix=None,
                     source_bits=8 * first.dtype.itemsize,
                     files=tuple(files) if kind == "sequence" else ())


def classify(spec) -> tuple[str, list[str]]:
    """Decide the kind of *spec* and list its files.

    Returns
    -------
    kind : str
        ``'clip'``, ``'still'`` or ``'sequence'``.
    files : list of str
        One file for clips and stills, all frames in order for sequences.
    """
    if not isinstance(spec, (str, os.PathLike)):
        raise MediaError(f"{spec!r}: a source must be a file path or an image-sequence pattern")
    s = os.fspath(spec)
    p = Path(s)
    if p.is_file():
        _check_file(p)
        return ("still" if p.suffix.lower() in STILL_EXTENSIONS else "clip"), [s]
    if p.is_dir():
        raise MediaError(f"{s}: is a folder; for an image sequence give a pattern such as "
                         f"{p / 'frame_%04d.png'} or {p / '*.png'}")
    if _PRINTF.search(p.name):
        return "sequence", _expand_printf(p)
    if glob.has_magic(s):
        return "sequence", _expand_glob(s)
    raise MediaError(f"{s}: no such file")


def _check_file(p: Path) -> None:
    if not os.access(p, os.R_OK):
        raise MediaError(f"{p}: cannot be read (permission denied)")
    if p.stat().st_size == 0:
        raise MediaError(f"{p}: is empty (0 bytes)")


def _check_fps(fps, spec) -> float:
    try:
        x = float(fps)
    except (TypeError, ValueError):
        x = math.nan
    if not math.isfinite(x) or x <= 0:
        raise MediaError(f"{spec}: frame rate {fps!r} is not a positive number of hertz")
    return x


def _natural_key(name: str):
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", name)]


def _expand_printf(p: Path) -> list[str]:
    folder = p.parent
    m = _PRINTF.search(p.name)
    width = int(m.group(2) or 0)
    digits = rf"(\d{{{width},}})" if m.group(1) == "0" and width else r"(\d+)"
    rx = re.compile(re.escape(p.name[:m.start()]) + digits + re.escape(p.name[m.end():]) + "$")
    if not folder.is_dir():
        raise MediaError(f"{p}: folder {folder} does not exist")
    found = []
    for entry in os.scandir(folder):
        mm = rx.match(entry.name)
        if mm and entry.is_file():
            found.append((int(mm.group(1)), entry.path))
    if not found:
        raise MediaError(f"{p}: no files match this image-sequence pattern")
    found.sort()
    numbers = [n for n, _ in found]
    missing = sorted(set(range(numbers[0], numbers[-1] + 1)) - set(numbers))
    if missing:
        shown = ", ".join(p.name.replace(m.group(0), m.group(0) % k) for k in missing[:5])
        more = f" and {len(missing) - 5} more" if len(missing) > 5 else ""
        raise MediaError(f"{p}: image sequence has gaps: missing {shown}{more}")
    if len(set(numbers)) != len(numbers):
        raise MediaError(f"{p}: two files carry the same frame number")
    return [path for _, path in found]


def _expand_glob(s: str) -> list[str]:
    files = [f for f in glob.glob(s) if os.path.isfile(f)]
    if not files:
        raise MediaError(f"{s}: no files match this image-sequence pattern")
    files.sort(key=lambda f: _natural_key(os.path.basename(f)))
    bad = [f for f in files if Path(f).suffix.lower() not in STILL_EXTENSIONS]
    if bad:
        raise MediaError(f"{s}: {bad[0]} is not an image file; accepted endings: "
                         + ", ".join(STILL_EXTENSIONS))
    return files


def read_image(path) -> np.ndarray:
    """Read one still as full-range R′G′B′ code values.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    numpy.ndarray, shape (H, W, 3), uint8 or uint16
        Alpha is dropped, grey is repeated into three channels.

    Raises
    ------
    MediaError
        Missing, empty, undecodable, or not 8/16-bit integer samples.
    """
    p = Path(path)
    if not p.is_file():
        raise MediaError(f"{p}: no such file")
    _check_file(p)
    img = cv2.imread(str(p), cv2.IMREAD_UNCHANGED)
    if img is None:
        raise MediaError(f"{p}: cannot be decoded as an image (damaged or unsupported format)")
    if img.dtype not in (np.uint8, np.uint16):
        raise MediaError(f"{p}: samples are {img.dtype}; only 8- and 16-bit integer "
                         "images are accepted")
    if img.ndim == 2:
        img = np.repeat(img[:, :, None], 3, axis=2)
    elif img.shape[2] == 4:
        img = cv2.cvtColor(img, cv2.COLOR_BGRA2RGB)
    elif img.shape[2] == 3:
        img = cv2.cvtColor(img, cv2.COLOR_BGR2RGB)
    else:
        raise MediaError(f"{p}: has {img.shape[2]} channels; expected 1, 3 or 4")
    return np.ascontiguousarray(img)


# --------------------------------------------------------------------------- clips

_DURATION = re.compile(r"Duration: (N/A|(\d+):(\d+):(\d+(?:\.\d+)?))")
_STREAM = re.compile(r"^\s*Stream #0:(\d+)[^:]*: (Video|Audio|Subtitle|Data|Attachment): (.*)$")
_VIDEO = re.compile(r"^(?P<codec>.*?), (?P<pix>[a-z0-9_]+)(?:\((?P<paren>[^)]*)\))?, "
                    r"(?P<w>\d+)x(?P<h>\d+)")
_RATE = re.compile(r"([\d.]+)(k?) (fps|tbr)")
_HZ = re.compile(r"(\d+) Hz")
_TAG_DURATION = re.compile(r"^\s*DURATION\s*:\s*(\d+):(\d+):(\d+(?:\.\d+)?)", re.I)


def _hms(h, m, s) -> float:
    return int(h) * 3600 + int(m) * 60 + float(s)


def _parse_header(path: str, text: str) -> dict:
    """Pull the first video stream and the first audio stream out of ``ffmpeg -i`` output."""
    lines = text.splitlines()
    if not any(line.startswith("Input #0") for line in lines):
        raise MediaError(f"{path}: cannot be read as video: {_ffmpeg.tail_text(lines, 2)}"
                         + _hint(text))
    facts: dict = {"duration_s": None, "video": None, "audio_rate": None, "has_audio": False,
                   "stream_duration_s": None}
    m = _DURATION.search(text)
    if m and m.group(1) != "N/A":
        facts["duration_s"] = _hms(m.group(2), m.group(3), m.group(4))
    current = None
    for line in lines:
        sm = _STREAM.match(line)
        if sm:
            current = None
            kind, rest = sm.group(2), sm.group(3)
            if kind == "Video" and facts["video"] is None and "(attached pic)" not in rest:
                vm = _VIDEO.match(rest)
                if vm:
                    facts["video"] = vm
                    facts["video_rest"] = rest
                    current = "video"
            elif kind == "Audio" and not facts["has_audio"]:
                facts["has_audio"] = True
                hz = _HZ.search(rest)
                facts["audio_rate"] = int(hz.group(1)) if hz else None
            continue
        if current == "video":
            tm = _TAG_DURATION.match(line)
            if tm:
                facts["stream_duration_s"] = _hms(*tm.groups())
    return facts


def _hint(text: str) -> str:
    low = text.lower()
    if "moov atom not found" in low:
        return " (the file index is missing: the file is truncated or was never finished)"
    if "invalid data found" in low:
        return " (not a video file, or damaged)"
    return ""


def _rate(rest: str) -> float | None:
    found = {}
    for value, kilo, unit in _RATE.findall(rest):
        found.setdefault(unit, float(value) * (1000 if kilo else 1))
    return found.get("fps") or found.get("tbr")


def _count_packets(path: str) -> tuple[int, str | None, list[str]]:
    """Count video packets by a stream copy into the null muxer (reads, does not decode)."""
    res = _ffmpeg.run(["-v", "warning", "-i", path, "-map", "0:v:0", "-c", "copy",
                       "-f", "null", "-", "-progress", "pipe:1", "-nostats"])
    lines = res.stderr.decode("utf-8", "replace").splitlines()
    if res.returncode != 0:
        raise MediaError(f"{path}: cannot be read: {_ffmpeg.tail_text(lines, 2)}")
    frames = [int(x[6:]) for x in res.stdout.decode("ascii", "replace").splitlines()
              if x.startswith("frame=") and x[6:].strip().isdigit()]
    mark = next((_ffmpeg.clean_line(x) for x in lines
                 if any(t in x.lower() for t in _TRUNCATION_MARKS)), None)
    return (frames[-1] if frames else 0), mark, lines


def _probe_clip(path: str, *, count_frames: bool | None) -> MediaInfo:
    res = _ffmpeg.run(["-i", path])
    text = res.stderr.decode("utf-8", "replace")
    facts = _parse_header(path, text)
    vm = facts["video"]
    if vm is None:
        what = "audio only" if facts["has_audio"] else "no streams at all"
        raise MediaError(f"{path}: has no video stream ({what})")
    width, height = int(vm.group("w")), int(vm.group("h"))
    if width <= 0 or height <= 0:
        raise MediaError(f"{path}: video stream has an impossible size {width}x{height}")
    fps = _rate(facts["video_rest"])
    if not fps or fps <= 0:
        raise MediaError(f"{path}: video stream declares no frame rate")
    fps = float(_ffmpeg.exact_rate(fps))
    pix = vm.group("pix")
    paren = [t.strip() for t in (vm.group("paren") or "").split(",")]
    rng = next((t for t in paren if t in ("tv", "pc")), None)
    matrix = None
    for t in paren:
        if "/" in t or t in _MATRIX:
            matrix = _MATRIX.get(t.split("/")[0])
            break
    duration = facts["duration_s"]
    if count_frames is None:
        count_frames = duration is None or duration <= COUNT_LIMIT_S
    if count_frames:
        n, mark, _ = _count_packets(path)
        if n == 0:
            raise MediaError(f"{path}: contains no video frames"
                             + (f" ({mark})" if mark else ""))
        if mark:
            raise MediaError(f"{path}: is truncated or damaged after {n} frames "
                             f"(ffmpeg: {mark})")
        promised = facts["stream_duration_s"]
        if promised is not None:
            expect = promised * fps
            if n < expect - max(2.0, 0.02 * expect):
                raise MediaError(f"{path}: is truncated: {n} frames found but the video "
                                 f"stream records {promised:.3f} s (about {round(expect)} "
                                 "frames)")
        exact = True
    else:
        if duration is None:
            raise MediaError(f"{path}: declares no duration and counting was turned off")
        n, exact = max(1, round(duration * fps)), False
    return MediaInfo(path=path, kind="clip", width=width, height=height, fps=fps, n_frames=n,
                     n_frames_exact=exact, duration_s=n / fps, has_audio=facts["has_audio"],
                     audio_rate=facts["audio_rate"], colour_matrix=matrix,
                     source_bits=_ffmpeg.pix_fmt_bits(pix), pix_fmt=pix, colour_range=rng,
                     codec=vm.group("codec").split(" ")[0])


def audio_stream(path) -> tuple[int | None, float | None]:
    """Check that a file has an audio stream; return its sample rate (Hz) and length (s).

    Works on audio-only files too.  The length is the container's duration (None when
    it declares none).

    Raises
    ------
    MediaError
        Missing, empty, unreadable, or without any audio stream.
    """
    kind, files = classify(path)
    if kind != "clip":
        raise MediaError(f"{path}: is a {kind}; it has no audio")
    res = _ffmpeg.run(["-i", files[0]])
    facts = _parse_header(files[0], res.stderr.decode("utf-8", "replace"))
    if not facts["has_audio"]:
        raise MediaError(f"{path}: has no audio stream")
    return facts["audio_rate"], facts["duration_s"]
