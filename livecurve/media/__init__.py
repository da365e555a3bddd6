"""Media in and out: probe and decode clips, stills, image sequences and cameras; encode
clips and stills all-or-nothing.

Pictures travel as interleaved full-range R′G′B′ code values, shape (H, W, 3), uint8 or
uint16 (ffmpeg's ``rgb24`` / ``rgb48le`` layouts); the engine's planar volts are made
from them by :mod:`livecurve.signal`.
"""

from livecurve.media.atomic import atomic_output, write_still
from livecurve.media.encode import ClipWriter
from livecurve.media.frame import Frame
from livecurve.media.probe import MediaInfo, audio_stream, probe, read_image
from livecurve.media.source import (
    FrameSource,
    TruncatedMediaWarning,
    open_source,
)

__all__ = [
    "CameraSource",
    "ClipWriter",
    "Frame",
    "FrameSource",
    "MediaInfo",
    "TruncatedMediaWarning",
    "atomic_output",
    "audio_stream",
    "open_camera",
    "open_source",
    "probe",
    "read_image",
    "write_still",
]


def __getattr__(name):
    # the camera pulls in OpenCV: imported when first asked for, not with the package
    if name in ("CameraSource", "open_camera"):
        from livecurve.media import camera
        return getattr(camera, name)
    raise AttributeError(f"module 'livecurve.media' has no attribute {name!r}")
