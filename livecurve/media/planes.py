"""Clips decoded as their own Y′CbCr planes, with no conversion to R′G′B′.

Most clips store 8-bit Y′CbCr with subsampled chroma (4:2:0).  The R′G′B′ path of
:mod:`livecurve.media.source` converts every frame to R′G′B′ (and the encoder converts it
back); a chain can instead work on the planes as stored (:mod:`livecurve.engine.fused`).
:class:`PlaneClipSource` asks the bundled ffmpeg for the decoder's own planes
(``-f rawvideo -pix_fmt yuv420p`` and the like, no filter), so each code is exactly what
the stream holds, in the stream's own range (limited or full).

Layouts (ffmpeg pixel formats): ``yuv420p``/``yuvj420p`` (chroma ⌈W/2⌉ × ⌈H/2⌉),
``yuv422p``/``yuvj422p`` (⌈W/2⌉ × H) and ``yuv444p``/``yuvj444p`` (W × H); the ``j``
formats are full range.  The same three at 10 and 12 bits (``yuv422p10le`` and the like,
as 10-bit cameras, capture cards and mezzanine codecs store them) decode to uint16
planes holding the codes as stored (0…1023 or 0…4095).  Odd sizes round the chroma up,
as ffmpeg stores them.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from livecurve.errors import MediaError
from livecurve.media import _ffmpeg
from livecurve.media.probe import MediaInfo, probe
from livecurve.media.source import ClipSource

#: ffmpeg pixel format → (horizontal, vertical) chroma shift.
LAYOUTS = {"yuv420p": (1, 1), "yuvj420p": (1, 1), "yuv422p": (1, 0), "yuvj422p": (1, 0),
           "yuv444p": (0, 0), "yuvj444p": (0, 0),
           "yuv420p10le": (1, 1), "yuv422p10le": (1, 0), "yuv444p10le": (0, 0),
           "yuv420p12le": (1, 1), "yuv422p12le": (1, 0), "yuv444p12le": (0, 0)}


def layout_bits(layout: str) -> int:
    """Bits per code of a planar layout (8, 10 or 12)."""
    for bits in (10, 12):
        if layout.endswith(f"p{bits}le"):
            return bits
    return 8


def writer_layout(layout: str) -> str:
    """The 8-bit legal-range layout with *layout*'s chroma subsampling: what the one-pass
    kernel writes (always 8-bit legal range, whatever the source's depth and range)."""
    sh, sv = LAYOUTS[layout]
    return {(1, 1): "yuv420p", (1, 0): "yuv422p", (0, 0): "yuv444p"}[(sh, sv)]


@dataclasses.dataclass(frozen=True, slots=True)
class PlaneFrame:
    """One decoded picture as Y′CbCr planes (uint8 views of one buffer).

    Attributes
    ----------
    index, time_s, lap
        As :class:`livecurve.media.frame.Frame`.
    y : ndarray (H, W) uint8
    cb, cr : ndarray uint8, chroma planes of the clip's layout
    """

    index: int
    time_s: float
    y: np.ndarray
    cb: np.ndarray
    cr: np.ndarray
    lap: int = 0


def plane_layout(info: MediaInfo) -> str | None:
    """The planar layout a clip decodes to without conversion, or None (R′G′B′, or a
    layout not in :data:`LAYOUTS`: use the R′G′B′ path)."""
    if info.kind != "clip":
        return None
    pix = info.pix_fmt or ""
    if pix not in LAYOUTS or layout_bits(pix) != max(8, info.source_bits):
        return None
    return pix


def is_full_range(info: MediaInfo) -> bool:
    """True when the clip's codes are full range (``pc`` tag or a ``yuvj`` format)."""
    return info.colour_range == "pc" or (info.pix_fmt or "").startswith("yuvj")


def chroma_shape(layout: str, width: int, height: int) -> tuple[int, int]:
    """Shape (rows, columns) of each chroma plane of *layout* at *width* × *height*."""
    sh, sv = LAYOUTS[layout]
    return (height + sv) >> sv, (width + sh) >> sh


class PlaneClipSource(ClipSource):
    """Frames of a clip as :class:`PlaneFrame` (see the module docstring).

    Parameters are those of :class:`~livecurve.media.source.ClipSource` without the
    colour conversion options.
    """

    def __init__(self, info: MediaInfo, *, start_s=0.0, duration_s=None, loop=False):
        layout = plane_layout(info)
        if layout is None:
            raise MediaError(f"{info.path}: {info.pix_fmt} at {info.source_bits} bits is not "
                             f"one of the planar layouts {', '.join(LAYOUTS)}")
        self.layout = layout
        self.bits = layout_bits(layout)
        self.full_range = is_full_range(info)
        h, w = info.height, info.width
        self._cshape = chroma_shape(layout, w, h)
        self._ysize = h * w
        self._csize = self._cshape[0] * self._cshape[1]
        super().__init__(info, start_s=start_s, duration_s=duration_s, loop=loop,
                         exact_colour=False)
        # after the base class, which sets the R′G′B′ path's sample type
        self.dtype = np.dtype(np.uint8) if self.bits == 8 else np.dtype("<u2")
        self._nbytes = (self._ysize + 2 * self._csize) * self.dtype.itemsize

    def _command(self, index: int) -> list[str]:
        info = self.info
        cmd = [_ffmpeg.ffmpeg_exe(), "-hide_banner", "-nostdin", "-v", "error"]
        if index > 0:
            cmd += ["-ss", f"{(index - 0.5) / info.fps:.6f}"]
        cmd += ["-i", info.path, "-map", "0:v:0", "-an", "-sn", "-dn",
                "-fps_mode", "passthrough"]
        if self.stop_index is not None:
            cmd += ["-frames:v", str(self.stop_index - index)]
        return cmd + ["-f", "rawvideo", "-pix_fmt", self.layout, "pipe:1"]

    def _read(self):
        buf = np.empty(self._ysize + 2 * self._csize, self.dtype)
        view = memoryview(buf).cast("B")
        got = 0
        stream = self._stdout()
        while got < self._nbytes:
            n = stream.readinto(view[got:])
            if not n:
                break
            got += n
        return buf if got == self._nbytes else None

    def __next__(self) -> PlaneFrame:
        fr = super().__next__()
        buf = fr.rgb
        h, w = self.info.height, self.info.width
        y = buf[:self._ysize].reshape(h, w)
        cb = buf[self._ysize:self._ysize + self._csize].reshape(self._cshape)
        cr = buf[self._ysize + self._csize:].reshape(self._cshape)
        return PlaneFrame(fr.index, fr.time_s, y, cb, cr, fr.lap)


def open_planes(path, *, start_s: float = 0.0, duration_s: float | None = None,
                loop: bool = False) -> PlaneClipSource:
    """Open a clip to be decoded as its own Y′CbCr planes (see :func:`plane_layout`)."""
    return PlaneClipSource(probe(path), start_s=start_s, duration_s=duration_s, loop=loop)
