"""Clip encoder: R′G′B′ frames piped into the bundled ffmpeg, all-or-nothing.

Two codecs:

``h264``
    ITU-T H.264 through libx264 (preset ``veryfast``, constant quality ``crf`` 18 by
    default), 4:2:0 Y′CbCr at 8 bits, limited range.  The R′G′B′ → Y′CbCr matrix is
    chosen explicitly (BT.709 by default; ITU-R BT.601/BT.709/BT.2020) and written
    into the stream's colour tags, so decoders do not have to guess.  Containers:
    ``.mp4``, ``.mov`` (with the index moved to the front for streaming) or ``.mkv``.
``ffv1``
    FFV1 (IETF RFC 9043) lossless, intra-only, stored as planar R′G′B′ (``gbrp`` for
    uint8 frames, ``gbrp16le`` for uint16) in ``.mkv``: what goes in comes back
    bit-exact.

The frame size is exactly the one given: no padding to macroblock multiples
(4:2:0 needs even width and height, which is checked).  The input pixel layout is
chosen at the first :meth:`ClipWriter.write`: ``rgb24`` for uint8, ``rgb48le``
for uint16.

Audio is carried across untouched: the chosen span of the first audio stream of
``audio_from`` is stream-copied (``-c:a copy``), so its packets are bit-identical
to the source's.  A copy starts on the first packet boundary at or after
``audio_start_s`` (within one audio frame of it, whatever the container).

Output goes through :func:`livecurve.media.atomic.atomic_output`: a failure,
an exception in the caller's block or Ctrl-C leaves neither the output nor a
temporary file behind.
"""

from __future__ import annotations

import math
import subprocess
from pathlib import Path

import numpy as np

from livecurve.errors import MediaError, OutputError
from livecurve.media import _ffmpeg
from livecurve.media.atomic import atomic_output, disk_full_error
from livecurve.media.probe import audio_stream

CODECS = ("h264", "ffv1")
#: Planar 8-bit legal-range Y′CbCr layouts :meth:`ClipWriter.write_planes` takes.
_PLANAR = ("yuv420p", "yuv422p", "yuv444p")
MATRICES = ("bt601", "bt709", "bt2020")
CONTAINERS = {"h264": (".mp4", ".mov", ".mkv"), "ffv1": (".mkv",)}

# ffmpeg names for the colour tags of each matrix (ITU-T H.273 code points)
_TAGS = {
    "bt601": {"colorspace": "smpte170m", "color_primaries": "smpte170m",
              "color_trc": "smpte170m"},
    "bt709": {"colorspace": "bt709", "color_primaries": "bt709", "color_trc": "bt709"},
    "bt2020": {"colorspace": "bt2020nc", "color_primaries": "bt2020", "color_trc": "bt2020-10"},
}


class ClipWriter:
    """Encode frames to a clip file; use as a context manager.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (``.mp4``/``.mov``/``.mkv`` for h264, ``.mkv`` for ffv1).
    width, height : int, keyword-only
        Frame size in pixels.
    fps : float, Fraction or str, keyword-only
        Frame rate in Hz (``30``, ``29.97``, ``"30000/1001"``).
    codec : {'h264', 'ffv1'}, keyword-only
    audio_from : str or os.PathLike or None, keyword-only
        A file whose first audio stream is copied untouched into the output.
    audio_start_s : float, keyword-only
        Where the copied audio starts in that file (s).
    audio_duration_s : float or None, keyword-only
        How much audio to copy (s); None = to its end.
    force : bool, keyword-only
        Replace an existing output.
    crf : int, keyword-only
        x264 constant-rate factor (0 … 51, lower is better; h264 only).
    preset : str, keyword-only
        x264 speed preset (h264 only).
    matrix : {'bt601', 'bt709', 'bt2020'}, keyword-only
        R′G′B′ → Y′CbCr matrix for h264.

    Attributes
    ----------
    frames_written : int
    """

    def __init__(self, path, *, width: int, height: int, fps, codec: str = "h264",
                 audio_from=None, audio_start_s: float = 0.0,
                 audio_duration_s: float | None = None, force: bool = False, crf: int = 18,
                 preset: str = "veryfast", matrix: str = "bt709", layout: str | None = None,
                 threads: int | None = None):
        self.path = Path(path)
        p = self.path
        if codec not in CODECS:
            raise OutputError(f"{p}: codec {codec!r} is not one of {', '.join(CODECS)}")
        if p.suffix.lower() not in CONTAINERS[codec]:
            raise OutputError(f"{p}: {codec} is written to "
                              f"{' or '.join(CONTAINERS[codec])} files, not {p.suffix or 'none'!r}")
        for name, v in (("width", width), ("height", height)):
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v <= 0:
                raise OutputError(f"{p}: {name} {v!r} must be a positive whole number of pixels")
        self.width, self.height = int(width), int(height)
        if codec == "h264" and (self.width % 2 or self.height % 2):
            raise OutputError(f"{p}: h264 4:2:0 needs even width and height, got "
                              f"{self.width}x{self.height}; use codec='ffv1' for odd sizes")
        try:
            self.fps = _ffmpeg.exact_rate(fps)
        except (ValueError, ZeroDivisionError, TypeError) as exc:
            raise OutputError(f"{p}: frame rate {fps!r} is not a positive number of hertz") \
                from exc
        if matrix not in MATRICES:
            raise OutputError(f"{p}: matrix {matrix!r} is not one of {', '.join(MATRICES)}")
        if isinstance(crf, bool) or not isinstance(crf, int) or not 0 <= crf <= 51:
            raise OutputError(f"{p}: crf {crf!r} must be a whole number 0 … 51")
        if layout is not None and (codec != "h264" or layout not in _PLANAR):
            raise OutputError(f"{p}: Y′CbCr planes ({layout!r}) are written as h264 from "
                              f"{', '.join(_PLANAR)}")
        if threads is not None and (isinstance(threads, bool) or not isinstance(threads, int)
                                    or threads < 0):
            raise OutputError(f"{p}: encoder threads {threads!r} must be a whole number >= 0")
        self.layout, self.threads = layout, threads
        self.codec, self.matrix, self.crf, self.preset = codec, matrix, crf, str(preset)
        self.force = bool(force)
        self._audio = self._check_audio(audio_from, audio_start_s, audio_duration_s)
        self.frames_written = 0
        self._dtype: np.dtype | None = None
        self._proc: subprocess.Popen | None = None
        self._err: _ffmpeg.StderrTail | None = None
        self._atomic = None
        self._tmp: Path | None = None

    def _check_audio(self, audio_from, start_s, duration_s):
        if audio_from is None:
            return None
        _rate, length_s = audio_stream(audio_from)
        start = float(start_s)
        if not math.isfinite(start) or start < 0:
            raise OutputError(f"{self.path}: audio start {start_s!r} s must be 0 or more")
        if length_s is not None and start >= length_s:
            raise MediaError(f"{audio_from}: audio start {start:g} s is past its end "
                             f"({length_s:.3f} s)")
        if duration_s is not None:
            d = float(duration_s)
            if not math.isfinite(d) or d <= 0:
                raise OutputError(f"{self.path}: audio duration {duration_s!r} s must be "
                                  "positive")
        return str(audio_from), start, duration_s

    # -- context ----------------------------------------------------------------
    def __enter__(self):
        self._atomic = atomic_output(self.path, force=self.force)
        self._tmp = self._atomic.__enter__()
        return self

    def __exit__(self, etype, exc, tb):
        atomic, self._atomic = self._atomic, None
        if atomic is None:
            return False
        if etype is None:
            try:
                self._finish()
            except BaseException as fin:
                self._kill()
                # the cleanup either raises its own OutputError or hands *fin* back
                atomic.__exit__(type(fin), fin, fin.__traceback__)
                raise
            return atomic.__exit__(None, None, None)
        self._kill()
        return atomic.__exit__(etype, exc, tb)

    # -- frames -------------------------------------------------------------------
    def write(self, rgb: np.ndarray) -> None:
        """Append one frame.

        Parameters
        ----------
        rgb : numpy.ndarray, shape (height, width, 3), uint8 or uint16
            Full-range R′G′B′ code values; every frame has the dtype of the first.
        """
        if self._atomic is None:
            raise OutputError(f"{self.path}: write() outside 'with ClipWriter(...)'")
        a = np.asarray(rgb)
        if a.shape != (self.height, self.width, 3):
            raise OutputError(f"{self.path}: frame {self.frames_written} has shape {a.shape}; "
                              f"expected ({self.height}, {self.width}, 3)")
        if self._dtype is None:
            if a.dtype not in (np.uint8, np.uint16):
                raise OutputError(f"{self.path}: frames are {a.dtype}; give uint8 or uint16 "
                                  "code values")
            self._dtype = a.dtype
            self._start()
        elif a.dtype != self._dtype:
            raise OutputError(f"{self.path}: frame {self.frames_written} is {a.dtype} but the "
                              f"clip started as {self._dtype}")
        a = np.ascontiguousarray(a)
        if a.dtype.byteorder == ">":
            a = a.astype("<u2")
        try:
            self._proc.stdin.write(memoryview(a).cast("B"))
        except (BrokenPipeError, OSError) as exc:
            self._raise_failure(f"ffmpeg stopped accepting frames at frame "
                                f"{self.frames_written}", exc)
        self.frames_written += 1

    def write_planes(self, y: np.ndarray, cb: np.ndarray, cr: np.ndarray) -> None:
        """Append one frame given as 8-bit legal-range Y′CbCr planes of the writer's
        ``layout`` (no conversion: the planes go to the encoder as they are)."""
        if self._atomic is None:
            raise OutputError(f"{self.path}: write_planes() outside 'with ClipWriter(...)'")
        if self.layout is None:
            raise OutputError(f"{self.path}: write_planes() needs a writer made with layout=")
        sh = 1 if self.layout in ("yuv420p", "yuv422p") else 0
        sv = 1 if self.layout == "yuv420p" else 0
        cshape = ((self.height + sv) >> sv, (self.width + sh) >> sh)
        for name, a, shape in (("Y′", y, (self.height, self.width)), ("Cb", cb, cshape),
                               ("Cr", cr, cshape)):
            if a.shape != shape or a.dtype != np.uint8:
                raise OutputError(f"{self.path}: frame {self.frames_written}: {name} plane is "
                                  f"{a.dtype} {a.shape}; expected uint8 {shape}")
        if self._dtype is None:
            self._dtype = np.dtype(np.uint8)
            self._start()
        try:
            for a in (y, cb, cr):
                self._proc.stdin.write(memoryview(np.ascontiguousarray(a)).cast("B"))
        except (BrokenPipeError, OSError) as exc:
            self._raise_failure(f"ffmpeg stopped accepting frames at frame "
                                f"{self.frames_written}", exc)
        self.frames_written += 1

    # -- ffmpeg -------------------------------------------------------------------
    def command(self) -> list[str]:
        """The ffmpeg command line (without the executable) for the current settings."""
        pix_in = "rgb48le" if self._dtype == np.uint16 else "rgb24"
        if self.layout is not None:
            pix_in = self.layout
        rate = f"{self.fps.numerator}/{self.fps.denominator}"
        cmd = ["-hide_banner", "-nostdin", "-v", "error", "-y",
               "-f", "rawvideo", "-pix_fmt", pix_in, "-s", f"{self.width}x{self.height}",
               "-framerate", rate]
        start = self._audio[1] if self._audio else 0.0
        if start > 0:
            # The pictures are placed at the audio's start time and the output is trimmed
            # to it (output -ss, below): the copied audio then starts at the first source
            # packet at or after the start time, on every container.  A seek on the audio
            # input would land on the container's index point instead (Matroska cues can
            # be hundreds of ms before it).  Both options get the same digits.
            cmd += ["-itsoffset", f"{start:.6f}"]
        if self.layout is not None:
            # say what the planes are, so ffmpeg converts nothing on the way to the encoder
            cmd += ["-color_range", "tv"] + [x for k, v in _TAGS[self.matrix].items()
                                             for x in (f"-{k}", v)]
        cmd += ["-i", "pipe:0"]
        if self._audio:
            src, _, dur = self._audio
            if dur is not None:
                cmd += ["-t", f"{start + float(dur):.6f}"]
            cmd += ["-i", src]
        cmd += ["-map", "0:v:0"]
        if self._audio:
            cmd += ["-map", "1:a:0", "-c:a", "copy"]
        if start > 0:
            cmd += ["-ss", f"{start:.6f}"]
        if self.codec == "h264":
            tags = _TAGS[self.matrix]
            if self.layout is None:
                cmd += ["-vf", f"scale=out_color_matrix={self.matrix}:out_range=tv,"
                               "format=yuv420p"]
            elif self.layout != "yuv420p":
                cmd += ["-vf", "format=yuv420p"]
            cmd += ["-c:v", "libx264", "-preset", self.preset, "-crf", str(self.crf),
                    "-pix_fmt", "yuv420p", "-color_range", "tv"]
            if self.threads is not None:
                cmd += ["-threads", str(self.threads)]
            for key, value in tags.items():
                cmd += [f"-{key}", value]
            if self.path.suffix.lower() in (".mp4", ".mov"):
                cmd += ["-movflags", "+faststart"]
        else:
            pix_out = "gbrp16le" if self._dtype == np.uint16 else "gbrp"
            cmd += ["-c:v", "ffv1", "-level", "3", "-g", "1", "-slices", "4",
                    "-slicecrc", "1", "-pix_fmt", pix_out, "-color_range", "pc",
                    "-colorspace", "rgb"]
        return cmd + ["-fps_mode", "passthrough", str(self._tmp)]

    def _start(self) -> None:
        cmd = [_ffmpeg.ffmpeg_exe(), *self.command()]
        try:
            self._proc = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                                          stderr=subprocess.PIPE, bufsize=0)
        except OSError as exc:
            raise OutputError(f"{self.path}: cannot start ffmpeg: {exc}") from exc
        self._err = _ffmpeg.StderrTail(self._proc.stderr)

    def _raise_failure(self, what: str, exc: BaseException | None = None):
        proc, err = self._proc, self._err
        if proc is not None:
            try:
                proc.wait(10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        if err is not None:
            err.join()
        if err is not None and err.contains("no space left", "disk quota"):
            raise disk_full_error(self.path) from exc
        detail = err.text(6) if err is not None else str(exc)
        raise OutputError(f"{self.path}: {what}; no output was written. ffmpeg said: {detail}") \
            from exc

    def _finish(self) -> None:
        if self.frames_written == 0:
            raise OutputError(f"{self.path}: no frames were written; no output was written")
        try:
            self._proc.stdin.close()
        except (BrokenPipeError, OSError) as exc:
            self._raise_failure("ffmpeg failed while finishing", exc)
        rc = self._proc.wait()
        self._err.join()
        if rc != 0:
            self._raise_failure(f"ffmpeg exited with status {rc}")

    def _kill(self) -> None:
        _ffmpeg.stop_process(self._proc, grace_s=1.0)
        if self._err is not None:
            self._err.join(1.0)

