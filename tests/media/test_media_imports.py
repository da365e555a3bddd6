"""Module boundaries of livecurve.media: no import circle between the camera and the file
sources, and OpenCV's own log lines held back while a device is opened."""

from __future__ import annotations

import ast
from pathlib import Path

import cv2

import livecurve.media.camera as camera
from livecurve.errors import DeviceError

MEDIA = Path(camera.__file__).parent


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module:
            out.add(node.module)
        elif isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
    return out


def test_camera_and_source_do_not_import_each_other():
    assert "livecurve.media.source" not in _imports(MEDIA / "camera.py")
    assert "livecurve.media.frame" in _imports(MEDIA / "camera.py")
    # the file sources reach the camera only through open_source, lazily (a camera pulls in
    # OpenCV); nothing at module level
    top = ast.parse((MEDIA / "source.py").read_text()).body
    mods = {n.module for n in top if isinstance(n, ast.ImportFrom)}
    assert "livecurve.media.camera" not in mods


def test_opencv_is_silent_while_a_camera_opens(monkeypatch):
    log = cv2.utils.logging
    seen = []

    class Capture:
        def __init__(self, index):
            seen.append(log.getLogLevel())

        def isOpened(self):
            return False

        def release(self):
            pass

    before = log.getLogLevel()
    monkeypatch.setattr(camera.cv2, "VideoCapture", Capture)
    try:
        camera.open_camera(3)
    except DeviceError as exc:
        assert "camera 3" in str(exc)
    assert seen == [log.LOG_LEVEL_SILENT]
    assert log.getLogLevel() == before
