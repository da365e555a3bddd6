"""Cameras: an absent device is a DeviceError; the frame path works behind the seam.

The frame path is exercised with ``cv2.VideoCapture`` opened on a file (the same
object type a device gives), so channel order and stamping are checked without a
camera.  Channel order reference: OpenCV delivers B, G, R (OpenCV documentation,
``cv::VideoCapture::read``); we must hand on R, G, B.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from livecurve.errors import DeviceError, MediaError
from livecurve.media import CameraSource, open_camera, open_source
from tests.media.conftest import ffmpeg


def _absent_index() -> int:
    import glob
    present = {int(p[len("/dev/video"):]) for p in glob.glob("/dev/video*")
               if p[len("/dev/video"):].isdigit()}
    return next(i for i in range(9, 64) if i not in present)


def test_absent_camera_is_a_device_error():
    index = _absent_index()
    with pytest.raises(DeviceError, match=f"camera {index}: no such camera"):
        open_camera(index)


def test_camera_spec_through_open_source():
    index = _absent_index()
    with pytest.raises(DeviceError, match=f"camera {index}"):
        open_source(f"camera:{index}")
    with pytest.raises(MediaError, match="camera:N"):
        open_source("camera:front")


def test_bad_index():
    with pytest.raises(DeviceError, match="device number"):
        open_camera(-1)


def test_frames_behind_the_seam_are_rgb(tmp_path):
    # a red clip: lavfi's colour source makes Y′CbCr, so red comes back near (255, 0, 0)
    clip = tmp_path / "red.mkv"
    ffmpeg("-y", "-f", "lavfi", "-i", "color=c=0xFF0000:size=64x48:rate=25:duration=0.2",
           "-c:v", "ffv1", "-pix_fmt", "bgr0", str(clip))
    cap = cv2.VideoCapture(str(clip))
    assert cap.isOpened(), "OpenCV in this wheel cannot read an FFV1 file"
    with CameraSource(cap, name="test capture") as cam:
        assert (cam.info.kind, cam.info.width, cam.info.height) == ("camera", 64, 48)
        assert cam.info.n_frames is None and cam.info.duration_s is None
        a, b = next(cam), next(cam)
        with pytest.raises(MediaError, match="cannot seek"):
            cam.seek(0.0)
    assert a.rgb.shape == (48, 64, 3) and a.rgb.dtype == np.uint8
    r, g, b_ = (int(v) for v in a.rgb[10, 10])
    assert r >= 245 and g <= 8 and b_ <= 8, a.rgb[10, 10]  # B′G′R′ order would fail here
    assert (a.index, b.index) == (0, 1) and 0.0 <= a.time_s <= b.time_s


def test_lost_device_is_a_device_error(tmp_path):
    clip = tmp_path / "short.mkv"
    ffmpeg("-y", "-f", "lavfi", "-i", "color=c=blue:size=32x32:rate=25:duration=0.08",
           "-c:v", "ffv1", str(clip))
    cam = CameraSource(cv2.VideoCapture(str(clip)), name="test capture")
    with pytest.raises(DeviceError, match="stopped delivering pictures after 2 frames"):
        for _ in range(10):
            next(cam)
    cam.close()
