"""``livecurve demo``: every file it writes is printed; the before/after still is labelled
and its pictures are untouched."""

from __future__ import annotations

import cv2
import numpy as np

from livecurve.config.chainfile import load_chain
from livecurve.outputs import demo
from livecurve.outputs.render import RenderReport


def test_every_written_file_is_printed(tmp_path, monkeypatch):
    def fake_render(spec, source, output, **kw):  # the clip itself is tested in tests/cli
        with open(output, "wb") as fh:
            fh.write(b"clip")
        return RenderReport(str(output), 3, 1.0, 3.0, 1e-5)

    monkeypatch.setattr("livecurve.outputs.render.render", fake_render)
    said: list[str] = []
    written = demo.run_demo(tmp_path / "d", quick=True, say=said.append)
    on_disk = sorted(p.name for p in (tmp_path / "d").iterdir())
    assert sorted(p.name for p in written) == on_disk
    assert len(on_disk) == 5
    wrote_lines = [s for s in said if s.strip().startswith("wrote ")]
    assert len(wrote_lines) == len(on_disk)
    for p in written:
        assert any(f"wrote {p}" in s for s in wrote_lines), p


def test_before_after_still_is_labelled_and_exact(tmp_path):
    from livecurve.media.source import open_source
    spec = load_chain(demo.chain_path("night_knee"))
    clip = demo.demo_clip()
    path = tmp_path / "ba.png"
    demo._before_after(spec, clip, path, at_s=1.0)
    img = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)[:, :, ::-1]
    assert img.dtype == np.uint16
    with open_source(str(clip), start_s=1.0, duration_s=1.0) as src:
        fr = next(iter(src))
    h, w = fr.rgb.shape[:2]
    band = demo.LABEL_BAND_PX
    assert img.shape == (band + h, 2 * w, 3)
    # below the band the source frame is exactly there (8-bit codes × 257)
    np.testing.assert_array_equal(img[band:, :w], fr.rgb.astype(np.uint16) * 257)
    # each half of the band carries text: bright pixels on the dark ground
    for half in (img[:band, :w], img[:band, w:]):
        assert (half.max(axis=2) > 0xC000).mean() > 0.01


def test_label_band_text_is_centred_per_part():
    band = demo.label_band(800, ["left", "right"], height=48)
    lit = band.max(axis=2) > 0x8000
    cols = np.flatnonzero(lit.any(axis=0))
    assert cols.min() > 100 and cols.max() < 700
    assert lit[:, :400].any() and lit[:, 400:].any()
