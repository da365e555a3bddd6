"""Frames from clips, stills and image sequences as full-range R′G′B′ code values.

Every source yields :class:`Frame` objects whose ``rgb`` is an interleaved
(H, W, 3) array of full-range R′G′B′ code values, uint8 for 8-bit sources and
uint16 for deeper ones, exactly as ffmpeg's ``rgb24`` / ``rgb48le`` formats lay
them out.

Clips are decoded by the bundled ffmpeg through a pipe.  The Y′CbCr → R′G′B′
conversion is done by the zimg library (ffmpeg's ``zscale`` filter) without
dither, so each code value is the correctly rounded result of the ITU-R matrix;
4:2:0/4:2:2 chroma is upsampled bilinearly (no overshoot at saturated edges).
``exact_colour=False`` selects ffmpeg's built-in converter instead: cheaper,
but up to about 3 codes off on 8-bit 75 % bars (measured here).  The matrix is set
explicitly, because ffmpeg assumes BT.601 for any untagged stream:
the stream's own tag when present (see :mod:`livecurve.media.probe`), else the
common-practice guess BT.709 for pictures at least 1280 wide or 720 high and
BT.601 below that; ``matrix=`` overrides both.  The range (limited ``tv`` or full
``pc``) follows the stream's tag; untagged Y′CbCr is taken as limited range as
ITU-R BT.601/BT.709 define it.

Timing: frame *i* of a clip has time ``i / fps`` seconds (constant-rate clips;
for variable-rate clips this is nominal).  A window ``start_s``/``duration_s``
selects the frames whose index lies in ``[ceil(start_s·fps), ceil((start_s +
duration_s)·fps))``.  With ``loop=True`` the window repeats forever and each
:class:`Frame` carries the pass number in ``lap``.

A clip that ends before its probed (exact) frame count, or whose decoder
reports errors after some frames were delivered, is *not* an exception during
playback: the frames that decoded are delivered and a
:class:`TruncatedMediaWarning` names the file and the count (``frames_missing``
keeps the number).  A clip that delivers no frame at all raises
:class:`~livecurve.errors.MediaError`.
"""

from __future__ import annotations

import math
import os
import subprocess
import warnings

import numpy as np

from livecurve.errors import MediaError
from livecurve.media import _ffmpeg
from livecurve.media.frame import Frame
from livecurve.media.probe import (
    DEFAULT_SEQUENCE_FPS,
    MediaInfo,
    probe,
    read_image,
)

MATRICES = ("bt601", "bt709", "bt2020")
_ZIMG_MATRIX = {"bt601": "470bg", "bt709": "709", "bt2020": "2020_ncl"}


class TruncatedMediaWarning(UserWarning):
    """A clip delivered fewer frames than it promised (file cut short or damaged)."""


def default_matrix(width: int, height: int) -> str:
    """Common-practice guess for an untagged stream: BT.709 for HD and larger, else BT.601."""
    return "bt709" if width >= 1280 or height >= 720 else "bt601"


class FrameSource:
    """Iterator of :class:`Frame` over a window of a source; a context manager.

    Do not construct directly: use :func:`open_source`.  Subclasses provide
    ``_open_at(index)``, ``_read()`` (next picture or None at the end) and ``_close()``.

    Attributes
    ----------
    info : MediaInfo
        What :func:`~livecurve.media.probe.probe` found.
    first_index, stop_index : int, int or None
        The window in frame numbers (stop excluded; None = until the end of the file).
    frames_missing : int
        Frames the last pass fell short of the promised count (0 when complete).
    """

    def __init__(self, info: MediaInfo, *, start_s: float, duration_s: float | None,
                 loop: bool):
        self.info = info
        self.loop = bool(loop)
        fps = info.fps
        start_s = float(start_s)
        if not math.isfinite(start_s) or start_s < 0:
            raise MediaError(f"{info.path}: start {start_s!r} s must be 0 or more")
        self.first_index = math.ceil(start_s * fps - 1e-6)
        if info.n_frames is not None and self.first_index >= info.n_frames:
            raise MediaError(f"{info.path}: start {start_s:g} s is past the end "
                             f"({info.n_frames} frames, {info.n_frames / fps:.3f} s)")
        stop = None
        if duration_s is not None:
            d = float(duration_s)
            if not math.isfinite(d) or d <= 0:
                raise MediaError(f"{info.path}: duration {duration_s!r} s must be positive")
            stop = math.ceil((start_s + d) * fps - 1e-6)
        if info.n_frames is not None and (stop is None or stop > info.n_frames):
            stop = info.n_frames if info.n_frames_exact else stop
        self.stop_index = stop
        self.frames_missing = 0
        self._next_index = self.first_index
        self._lap = 0
        self._pass_frames = 0
        self._closed = False
        self._exhausted = False
        self._open_at(self.first_index)

    # -- subclass hooks -------------------------------------------------------------
    def _open_at(self, index: int) -> None:
        raise NotImplementedError

    def _read(self) -> np.ndarray | None:
        raise NotImplementedError

    def _close(self) -> None:
        pass

    def _finish_pass(self, complete: bool) -> None:
        """Called at the end of a pass; *complete* is False when frames fell short."""

    # -- public ---------------------------------------------------------------------
    def __iter__(self):
        return self

    def __next__(self) -> Frame:
        if self._closed or self._exhausted:
            raise StopIteration
        for _attempt in range(2):
            if self.stop_index is None or self._next_index < self.stop_index:
                rgb = self._read()
                if rgb is not None:
                    i = self._next_index
                    self._next_index += 1
                    self._pass_frames += 1
                    return Frame(i, i / self.info.fps, rgb, self._lap)
            self._exhausted = True
            self._end_of_pass()
            if self._pass_frames == 0:
                raise MediaError(f"{self.info.path}: delivered no frames from "
                                 f"{self._next_index / self.info.fps:.3f} s on")
            if not self.loop:
                raise StopIteration
            self._exhausted = False
            self._lap += 1
            self._pass_frames = 0
            self._next_index = self.first_index
            self._open_at(self.first_index)
        raise StopIteration  # pragma: no cover - a fresh pass always yields or raises

    def _end_of_pass(self) -> None:
        short = 0
        if self.stop_index is not None and self._next_index < self.stop_index:
            short = self.stop_index - self._next_index
        self.frames_missing = short
        self._finish_pass(short == 0)

    def read(self) -> Frame | None:
        """Next frame, or None at the end (never None when looping)."""
        return next(self, None)

    def seek(self, time_s: float) -> None:
        """Continue from the first frame at or after *time_s* (source time, s).

        The time must lie inside the window given to :func:`open_source`.
        """
        t = float(time_s)
        index = math.ceil(t * self.info.fps - 1e-6) if math.isfinite(t) else -1
        stop = self.stop_index if self.stop_index is not None else math.inf
        if not self.first_index <= index < stop:
            lo = self.first_index / self.info.fps
            hi = "end" if stop == math.inf else f"{stop / self.info.fps:.3f} s"
            raise MediaError(f"{self.info.path}: cannot seek to {time_s!r} s; the window runs "
                             f"from {lo:.3f} s to {hi}")
        self._next_index = index
        self._pass_frames = 0
        self._exhausted = False
        self._open_at(index)

    def restart(self) -> None:
        """Go back to the start of the window (lap count kept)."""
        self.seek(self.first_index / self.info.fps)

    def close(self) -> None:
        """Release the decoder; safe to call twice."""
        if not self._closed:
            self._closed = True
            self._close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def __del__(self):  # pragma: no cover - best effort at interpreter exit
        try:
            self.close()
        except Exception:
            pass


class ClipSource(FrameSource):
    """Frames of a clip decoded by the bundled ffmpeg (see module docstring).

    Attributes
    ----------
    decode_matrix : str or None
        Y′CbCr matrix used (None for clips stored as R′G′B′ or grey).
    exact_colour : bool
        True when the zimg converter (``zscale``) is used.
    dtype : numpy.dtype
        uint8 for sources of 8 bits or fewer, uint16 otherwise.
    """

    def __init__(self, info: MediaInfo, *, start_s=0.0, duration_s=None, loop=False,
                 matrix: str | None = None, exact_colour: bool = True):
        if matrix is not None and matrix not in MATRICES:
            raise MediaError(f"{info.path}: matrix {matrix!r} is not one of {', '.join(MATRICES)}")
        self.exact_colour = bool(exact_colour) and _ffmpeg.has_filter("zscale")
        if _ffmpeg.is_rgb_or_grey(info.pix_fmt or ""):
            self.decode_matrix = None  # stored as R′G′B′ or grey: no matrix applies
        else:
            self.decode_matrix = matrix or info.colour_matrix or default_matrix(info.width,
                                                                                info.height)
        self.dtype = np.dtype(np.uint8) if info.source_bits <= 8 else np.dtype(np.uint16)
        self._shape = (info.height, info.width, 3)
        self._nbytes = info.height * info.width * 3 * self.dtype.itemsize
        self._proc: subprocess.Popen | None = None
        self._err: _ffmpeg.StderrTail | None = None
        super().__init__(info, start_s=start_s, duration_s=duration_s, loop=loop)

    def _command(self, index: int) -> list[str]:
        info = self.info
        vf = self._filter()
        cmd = [_ffmpeg.ffmpeg_exe(), "-hide_banner", "-nostdin", "-v", "error"]
        if index > 0:
            # seconds with enough digits that ceil(t·fps) lands on this frame
            cmd += ["-ss", f"{(index - 0.5) / info.fps:.6f}"]
        cmd += ["-i", info.path, "-map", "0:v:0", "-an", "-sn", "-dn", "-vf", vf,
                "-fps_mode", "passthrough"]
        if self.stop_index is not None:
            cmd += ["-frames:v", str(self.stop_index - index)]
        pix = "rgb24" if self.dtype == np.uint8 else "rgb48le"
        return cmd + ["-f", "rawvideo", "-pix_fmt", pix, "pipe:1"]

    def _filter(self) -> str:
        """The Y′CbCr → R′G′B′ filter for this clip (see module docstring)."""
        info = self.info
        full = info.colour_range == "pc" or (info.pix_fmt or "").startswith("yuvj")
        if self.decode_matrix is None:
            return "null"
        if self.exact_colour:
            planar = "gbrp" if self.dtype == np.uint8 else "gbrp16le"
            # zimg refuses subsampled chroma on an odd-sized picture: bring the chroma to
            # full resolution first (ffmpeg's own resampler), then convert exactly
            pre = ""
            if (info.width % 2 or info.height % 2) and _subsampled(info.pix_fmt or ""):
                pre = "format=yuv444p," if self.dtype == np.uint8 else "format=yuv444p16le,"
            return (f"{pre}zscale=matrixin={_ZIMG_MATRIX[self.decode_matrix]}"
                    f":rangein={'full' if full else 'limited'}:dither=none:filter=bilinear,"
                    f"format={planar}")
        return (f"scale=in_color_matrix={self.decode_matrix}"
                f":in_range={'pc' if full else 'tv'}")

    def _open_at(self, index: int) -> None:
        # the decoder starts at the first read (or :meth:`start`): a source opened only
        # for its facts, or replaced by another decoder, costs no ffmpeg process
        self._close()
        self._pending = index

    def start(self) -> None:
        """Start the decoder now rather than at the first frame (so it works while the
        caller gets ready).  Raises MediaError when ffmpeg cannot be started."""
        index = getattr(self, "_pending", None)
        if index is None or self._closed:
            return
        self._pending = None
        try:
            self._proc = subprocess.Popen(self._command(index), stdin=subprocess.DEVNULL,
                                          stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                          bufsize=0)
        except OSError as exc:
            raise MediaError(f"{self.info.path}: cannot start ffmpeg: {exc}") from exc
        self._err = _ffmpeg.StderrTail(self._proc.stderr)

    def _stdout(self):
        """The running decoder's output pipe (started here if it has not been)."""
        if self._proc is None:
            self.start()
        return self._proc.stdout

    def _read(self) -> np.ndarray | None:
        out = np.empty(self._shape, self.dtype)
        view = memoryview(out).cast("B")
        got = 0
        stream = self._stdout()
        while got < self._nbytes:
            n = stream.readinto(view[got:])
            if not n:
                break
            got += n
        if got == self._nbytes:
            return out
        return None

    def _finish_pass(self, complete: bool) -> None:
        proc, err = self._proc, self._err
        if proc is None:
            return
        if proc.poll() is None and complete:
            _ffmpeg.stop_process(proc)  # window ended before the file did
            rc = 0
        else:
            rc = proc.wait()
        err.join()
        path = self.info.path
        if self._pass_frames == 0:
            raise MediaError(f"{path}: no frame could be decoded: {err.text(3)}")
        if not complete or rc != 0:
            count = f"{self._pass_frames} frames"
            if not complete:
                count += f" ({self.frames_missing} fewer than the file promised)"
            warnings.warn(f"{path}: decoding ended after {count}: {err.text(2)}",
                          TruncatedMediaWarning, stacklevel=3)

    def _close(self) -> None:
        _ffmpeg.stop_process(self._proc)
        if self._err is not None:
            self._err.join(1.0)
        self._proc, self._err, self._pending = None, None, None


class ImageSource(FrameSource):
    """Frames of a still (one frame) or of an image sequence (one file per frame)."""

    def __init__(self, info: MediaInfo, *, start_s=0.0, duration_s=None, loop=False):
        self._files = info.files if info.kind == "sequence" else (info.path,)
        self._first = read_image(self._files[0])
        self._cursor = 0
        super().__init__(info, start_s=start_s, duration_s=duration_s, loop=loop)

    def _open_at(self, index: int) -> None:
        self._cursor = index

    def _read(self) -> np.ndarray | None:
        if self._cursor >= len(self._files):
            return None
        f = self._files[self._cursor]
        self._cursor += 1
        img = self._first.copy() if len(self._files) == 1 else read_image(f)
        if img.shape != self._first.shape or img.dtype != self._first.dtype:
            h, w = self._first.shape[:2]
            raise MediaError(f"{f}: is {img.shape[1]}x{img.shape[0]} {img.dtype}, but the "
                             f"sequence started at {w}x{h} {self._first.dtype}")
        return img


def open_source(spec, *, start_s: float = 0.0, duration_s: float | None = None,
                loop: bool = False, matrix: str | None = None, exact_colour: bool = True,
                sequence_fps: float = DEFAULT_SEQUENCE_FPS) -> FrameSource:
    """Open a clip, still, image sequence or camera as a :class:`FrameSource`.

    Parameters
    ----------
    spec : str, os.PathLike or int
        A file; a printf pattern (``shot_%04d.png``) or glob (``shots/*.png``); a camera
        as an int or ``"camera:N"``.
    start_s : float, keyword-only
        Window start in source time (s).
    duration_s : float or None, keyword-only
        Window length (s); None = to the end.
    loop : bool, keyword-only
        Repeat the window forever.
    matrix : {'bt601', 'bt709', 'bt2020'} or None, keyword-only
        Override the Y′CbCr matrix used to decode a clip.
    exact_colour : bool, keyword-only
        Convert Y′CbCr → R′G′B′ with zimg, correctly rounded (default); False uses
        ffmpeg's faster built-in converter, up to about 3 codes off (measured on 75 % bars).
    sequence_fps : float, keyword-only
        Rate of stills and image sequences (Hz).

    Returns
    -------
    FrameSource
        Use as a context manager; ``.info`` holds the :class:`MediaInfo`.

    Raises
    ------
    MediaError
        Missing, damaged, truncated or empty source; a window outside the source.
    DeviceError
        A camera is absent.
    """
    if isinstance(spec, int) or (isinstance(spec, str) and spec.startswith("camera:")
                                 and not os.path.exists(spec)):
        from livecurve.media.camera import open_camera
        index = spec if isinstance(spec, int) else _camera_index(spec)
        return open_camera(index)
    if isinstance(spec, str) and spec.startswith("pattern:") and not os.path.exists(spec):
        from livecurve.media.pattern import PatternSource  # generated test signals
        return PatternSource(spec, start_s=start_s, duration_s=duration_s, loop=loop)
    info = probe(spec, sequence_fps=sequence_fps)
    if info.kind == "clip":
        return ClipSource(info, start_s=start_s, duration_s=duration_s, loop=loop,
                          matrix=matrix, exact_colour=exact_colour)
    return ImageSource(info, start_s=start_s, duration_s=duration_s, loop=loop)


def _subsampled(pix_fmt: str) -> bool:
    """True for Y′CbCr pixel formats whose chroma has fewer samples than luma."""
    return any(tag in pix_fmt for tag in ("420", "422", "411", "410", "440", "nv12", "nv21",
                                          "nv16", "p010", "p016", "yuyv", "uyvy"))


def _camera_index(spec: str) -> int:
    tail = spec.split(":", 1)[1]
    if not tail.isdigit():
        raise MediaError(f"{spec!r}: a camera is given as camera:N with N a device number")
    return int(tail)
