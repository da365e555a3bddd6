"""CLF export: valid XML of the Common LUT Format, OpenColorIO applies it, and it matches the
solver and a real 16-bit render.

References
----------
* Academy/ASC Common LUT Format v3 (S-2014-006): ``ProcessList`` with ``compCLFversion``,
  process nodes with ``inBitDepth``/``outBitDepth``, ``Array dim`` = "N 3" for LUT1D and
  "n n n 3" (blue fastest) for LUT3D, ``Matrix`` "3 4" with offsets, ``Range`` clamp.
* OpenColorIO (PyPI ``opencolorio``), the reference reader: a raw config,
  ``FileTransform(src=…)``, ``getDefaultCPUProcessor().applyRGB``.
* Output converter: 10-bit legal Y′ codes 64…940 (ITU-R BT.709), so half a code is
  0.5/876 of full scale; Pb/Pr 64…960, 0.5/896.
"""

from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from livecurve.config.chainfile import load_chain
from livecurve.errors import ConfigError, OutputError
from livecurve.outputs.clf import apply_lut3d, clf_text, static_rgb, write_clf
from livecurve.signal.component import ypbpr_to_rgb_matrix
from tests.conftest import require

ROOT = __import__("pathlib").Path(__file__).resolve().parents[2]
#: Allowed |OpenColorIO(CLF) − solver| on a test frame (the issue's bound).
CLF_TOL = 1e-4
#: The engine's table bound (0.05 mV, livecurve.engine.tables.TARGET_ERR_V) in 0…1 units.
TABLE_TOL = 0.05e-3 / 0.7

CHAINS = ["film_shoulder", "shadow_crush", "night_knee"]


def _ocio():
    try:
        import PyOpenColorIO as ocio
    except ImportError:
        ocio = None
    require(ocio is not None, "OpenColorIO (PyPI opencolorio)")
    return ocio


def _apply(ocio, path, rgb01, interp=None):
    ft = ocio.FileTransform(src=str(path), interpolation=interp or ocio.INTERP_LINEAR)
    proc = ocio.Config.CreateRaw().getProcessor(ft).getDefaultCPUProcessor()
    img = np.ascontiguousarray(rgb01, dtype=np.float32).reshape(1, -1, 3).copy()
    proc.applyRGB(img)
    return img.reshape(-1, 3).astype(np.float64)


def _test_codes(n=3000, seed=1):
    """16-bit codes: random colours, a grey ramp, the primaries and secondaries at 100 %."""
    rng = np.random.default_rng(seed)
    grey = np.repeat(np.linspace(0, 65535, 257).round()[:, None], 3, axis=1)
    corners = np.array([[a, b, c] for a in (0, 65535) for b in (0, 65535) for c in (0, 65535)])
    return np.concatenate([rng.integers(0, 65536, (n, 3)), grey, corners]).astype(np.float64)


def _spec(name):
    return load_chain(ROOT / "configs" / f"{name}.toml")


@pytest.mark.parametrize("name", CHAINS)
def test_clf_is_valid_xml(name, tmp_path):
    spec = _spec(name)
    rep = write_clf(tmp_path / "c.clf", spec)
    root = ET.parse(tmp_path / "c.clf").getroot()
    assert root.tag == "ProcessList" and root.get("compCLFversion") == "3" and root.get("id")
    nodes = [e for e in root if e.tag not in ("Description", "InputDescriptor",
                                              "OutputDescriptor")]
    want = ["LUT1D", "Range"] if spec.space == "rgb" else ["Matrix", "LUT1D", "Matrix",
                                                            "Range"]
    assert [e.tag for e in nodes] == want
    for e in nodes:
        assert e.get("inBitDepth") == "32f" and e.get("outBitDepth") == "32f"
    lut = root.find("LUT1D/Array")
    n, k = map(int, lut.get("dim").split())
    assert k == 3 and n == rep.size and len(lut.text.split()) == 3 * n
    for m in root.findall("Matrix/Array"):
        assert m.get("dim") == "3 4" and len(m.text.split()) == 12
    assert rep.interp_err <= 1e-5


@pytest.mark.parametrize("name", CHAINS)
def test_opencolorio_matches_the_solver(name, tmp_path):
    ocio = _ocio()
    spec = _spec(name)
    rep = write_clf(tmp_path / "c.clf", spec)
    x = _test_codes() / 65535
    got = _apply(ocio, tmp_path / "c.clf", x)
    exact = static_rgb(spec, x)
    err = np.abs(got - exact).max()
    print(f"{name}: {rep.form} {rep.size} entries, OCIO vs solver {err:.2e} "
          f"(own bound {rep.interp_err:.2e})")
    assert err < CLF_TOL
    # the chain really does something, so the agreement is not that of two identities
    assert np.abs(exact - x).max() > 0.05


def test_lut3d_form_read_in_the_same_order(tmp_path):
    ocio = _ocio()
    spec = _spec("night_knee")
    text, rep = clf_text(spec, form="lut3d", lut3d_size=17)
    (tmp_path / "c.clf").write_text(text)
    arr = ET.fromstring(text).find("LUT3D/Array")
    assert arr.get("dim") == "17 17 17 3"
    table = np.array(arr.text.split(), dtype=np.float64).reshape(17, 17, 17, 3)
    x = _test_codes(2000) / 65535
    got = _apply(ocio, tmp_path / "c.clf", x, ocio.INTERP_TETRAHEDRAL)
    np.testing.assert_allclose(got, apply_lut3d(table, x), atol=2e-6)
    # a cube cannot follow the knee and the clipping surfaces: its error is measured
    exact = static_rgb(spec, x)
    err = np.abs(got - exact).max()
    print(f"night_knee LUT3D 17^3: OCIO vs solver {err:.2e}, own measure {rep.interp_err:.2e}")
    assert err > CLF_TOL and rep.interp_err > CLF_TOL


def test_clf_applied_to_a_still_gives_the_render(tmp_path):
    """A 16-bit still through ``render`` and through the CLF in OpenColorIO.

    Each row is one colour, so after the line filters settle (8 columns) the render is
    static.  The render quantises at the 10-bit converter; the CLF does not: the bound is
    half a converter code carried through the inverse matrix, plus the table bound, plus
    half a 16-bit output code.
    """
    ocio = _ocio()
    from livecurve.media.atomic import write_still
    from livecurve.media.probe import read_image
    from livecurve.outputs.render import render
    rng = np.random.default_rng(4)
    rows = rng.integers(0, 65536, (160, 3)).astype(np.uint16)
    rows[:40] = np.repeat(np.linspace(0, 65535, 40).round()[:, None], 3, axis=1)
    frame = np.ascontiguousarray(np.repeat(rows[:, None, :], 48, axis=1))
    write_still(tmp_path / "in.png", frame)
    for name in CHAINS:
        spec = dataclasses.replace(_spec(name), controls={})  # knobs at their settings
        render(spec, str(tmp_path / "in.png"), str(tmp_path / f"{name}.png"), progress=False,
               flash_check=False)
        out = read_image(tmp_path / f"{name}.png").astype(np.float64) / 65535
        write_clf(tmp_path / f"{name}.clf", spec)
        got = _apply(ocio, tmp_path / f"{name}.clf", frame.reshape(-1, 3) / 65535)
        d = np.abs(out.reshape(-1, 3) - got).reshape(frame.shape)[:, 8:]
        half = np.array([0.5 / 876, 0.5 / 896, 0.5 / 896])
        tab = np.array([TABLE_TOL, 0.0, 0.0]) if spec.space == "ypbpr" else TABLE_TOL
        if spec.space == "ypbpr":
            m = np.abs(ypbpr_to_rgb_matrix(spec.standard_or_default))
            bound = m @ (half + tab)
        else:
            bound = np.full(3, half[0] + TABLE_TOL)
        bound = bound + 0.5 / 65535 + 1e-6
        print(f"{name}: render vs CLF worst {d.max(axis=(0, 1))} (bound {bound})")
        assert np.all(d.max(axis=(0, 1)) <= bound)


def test_temperature_and_knobs_change_the_entries():
    spec = _spec("night_knee")
    base, _ = clf_text(spec)
    warm, rep = clf_text(spec, t_kelvin=spec.ambient_k + 10)
    knob, _ = clf_text(spec, live={"knee_current": 100e-6})
    assert base != warm and base != knob
    assert "40.00 C" in warm and rep.t_kelvin == pytest.approx(spec.ambient_k + 10)


@pytest.mark.parametrize("kw,match", [({"live": {"nope": 1.0}}, "nope"),
                                      ({"live": {"knee_current": 1.0}}, "range"),
                                      ({"form": "lut1d"}, "Y′PbPr"),
                                      ({"form": "cube"}, "form"),
                                      ({"form": "lut3d", "lut3d_size": 200}, "size"),
                                      ({"t_kelvin": -3.0}, "temperature")])
def test_bad_requests(kw, match, tmp_path):
    with pytest.raises(ConfigError, match=match):
        write_clf(tmp_path / "c.clf", _spec("night_knee"), **kw)
    assert not list(tmp_path.iterdir())


def test_existing_file_is_kept_without_force(tmp_path):
    (tmp_path / "c.clf").write_text("mine")
    with pytest.raises(OutputError, match="exists"):
        write_clf(tmp_path / "c.clf", _spec("film_shoulder"), force=False)
    assert (tmp_path / "c.clf").read_text() == "mine"
    with pytest.raises(OutputError):
        write_clf(tmp_path / "no" / "c.clf", _spec("film_shoulder"))
