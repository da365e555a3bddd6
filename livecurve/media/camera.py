"""Live frames from a camera through OpenCV's ``cv2.VideoCapture``.

A camera is a :class:`~livecurve.media.source.FrameSource` without an end: it
cannot seek, restart or loop, its frame count and duration are unknown (None),
and each :class:`~livecurve.media.source.Frame` is stamped with the time since
the camera was opened (s, monotonic clock) rather than ``index / fps``.
Pictures arrive as 8-bit B′G′R′ from OpenCV and are handed on as R′G′B′.

The device sits behind a seam: :class:`CameraSource` takes any object with the
``isOpened``/``read``/``get``/``release`` methods of ``cv2.VideoCapture``, so the
frame path is tested with a capture opened on a file; :func:`open_camera` is the
only place that touches a device.
"""

from __future__ import annotations

import contextlib
import glob
import time

import cv2
import numpy as np

from livecurve.errors import DeviceError, MediaError
from livecurve.media.frame import Frame
from livecurve.media.probe import MediaInfo

#: Rate assumed when a driver reports none (Hz).
FALLBACK_FPS = 30.0


class CameraSource:
    """Iterator of :class:`~livecurve.media.source.Frame` from an opened capture.

    Parameters
    ----------
    capture : cv2.VideoCapture or compatible
        An opened capture; it is released by :meth:`close`.
    name : str, keyword-only
        How the device is named in messages and in ``info.path``.
    """

    loop = False
    first_index = 0       # the same window attributes as a FrameSource: no end
    stop_index = None

    def __init__(self, capture, *, name: str):
        if capture is None or not capture.isOpened():
            raise DeviceError(f"{name}: capture is not open")
        self._cap = capture
        self._name = name
        ok, bgr = capture.read()
        if not ok or bgr is None:
            capture.release()
            raise DeviceError(f"{name}: opened but delivered no picture (device busy, "
                              "unplugged, or not a video capture device)")
        self._pending = bgr
        fps = float(capture.get(cv2.CAP_PROP_FPS) or 0.0)
        if not 0.0 < fps < 1000.0:
            fps = FALLBACK_FPS
        h, w = bgr.shape[:2]
        self.info = MediaInfo(path=name, kind="camera", width=w, height=h, fps=fps,
                              n_frames=None, n_frames_exact=False, duration_s=None,
                              has_audio=False, audio_rate=None, colour_matrix=None,
                              source_bits=8 * bgr.dtype.itemsize)
        self.frames_missing = 0
        self._index = 0
        self._t0 = time.monotonic()
        self._closed = False

    def __iter__(self):
        return self

    def __next__(self) -> Frame:
        if self._closed:
            raise StopIteration
        if self._pending is not None:
            bgr, self._pending = self._pending, None
        else:
            ok, bgr = self._cap.read()
            if not ok or bgr is None:
                raise DeviceError(f"{self._name}: stopped delivering pictures after "
                                  f"{self._index} frames (unplugged or busy?)")
        rgb = _to_rgb(bgr, self._name)
        i = self._index
        self._index += 1
        return Frame(i, time.monotonic() - self._t0, rgb, 0)

    def read(self) -> Frame:
        """Next frame (a camera never ends; a lost device raises DeviceError)."""
        return next(self)

    def seek(self, time_s: float) -> None:
        """Cameras cannot seek."""
        raise MediaError(f"{self._name}: a live camera cannot seek")

    def restart(self) -> None:
        """Cameras cannot restart."""
        raise MediaError(f"{self._name}: a live camera cannot restart")

    def close(self) -> None:
        """Release the device; safe to call twice."""
        if not self._closed:
            self._closed = True
            self._cap.release()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


@contextlib.contextmanager
def quiet_library():
    """Silence OpenCV's own log lines (``[ WARN:0@…] … can't open camera by index``) while a
    device is opened, so livecurve's message is the first the user reads."""
    log = getattr(getattr(cv2, "utils", None), "logging", None)
    if log is None or not hasattr(log, "setLogLevel"):
        yield
        return
    old = log.getLogLevel()
    log.setLogLevel(log.LOG_LEVEL_SILENT)
    try:
        yield
    finally:
        log.setLogLevel(old)


def _to_rgb(bgr: np.ndarray, name: str) -> np.ndarray:
    if bgr.ndim == 2:
        return np.ascontiguousarray(np.repeat(bgr[:, :, None], 3, axis=2))
    if bgr.ndim == 3 and bgr.shape[2] == 3:
        return cv2.cvtColor(bgr, cv2.COLOR_BGR2RGB)
    if bgr.ndim == 3 and bgr.shape[2] == 4:
        return cv2.cvtColor(bgr, cv2.COLOR_BGRA2RGB)
    raise DeviceError(f"{name}: delivered pictures of shape {bgr.shape}; expected colour")


def open_camera(index: int = 0, *, width: int | None = None, height: int | None = None,
                fps: float | None = None) -> CameraSource:
    """Open camera number *index* (``/dev/videoN`` on Linux).

    Parameters
    ----------
    index : int
        Device number.
    width, height : int or None, keyword-only
        Picture size to request (the driver may pick another; see ``.info``).
    fps : float or None, keyword-only
        Rate to request (Hz).

    Returns
    -------
    CameraSource

    Raises
    ------
    DeviceError
        No such camera, or it opens but delivers no picture.
    """
    if isinstance(index, bool) or not isinstance(index, int) or index < 0:
        raise DeviceError(f"camera {index!r}: a camera is a device number 0, 1, 2, ...")
    name = f"camera {index}"
    with quiet_library():
        cap = cv2.VideoCapture(index)
    if not cap.isOpened():
        cap.release()
        present = sorted(glob.glob("/dev/video*"))
        seen = ("devices present: " + ", ".join(present)) if present else "no /dev/video* device"
        raise DeviceError(f"{name}: no such camera or it cannot be opened ({seen})")
    if width:
        cap.set(cv2.CAP_PROP_FRAME_WIDTH, int(width))
    if height:
        cap.set(cv2.CAP_PROP_FRAME_HEIGHT, int(height))
    if fps:
        cap.set(cv2.CAP_PROP_FPS, float(fps))
    return CameraSource(cap, name=name)
