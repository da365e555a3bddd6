"""Text from a chain file inside the files other programs read: CLF (XML) and CSV.

* CLF: a title and notes full of markup, quotes, line breaks and characters XML 1.0 forbids
  (W3C XML 1.0 5th ed. §2.2 "Char": only #x9, #xA, #xD, #x20–#xD7FF, #xE000–#xFFFD and
  above are allowed) must give a document that Python's ``xml.etree`` (expat) and
  OpenColorIO (PyPI ``opencolorio``, the reference CLF reader) both parse, with the title
  kept as plain text and no element the chain did not ask for.
* CSV: outputs hold numbers only (RFC 4180 fields), so no cell can start a spreadsheet
  formula (``= + - @`` followed by text; OWASP "CSV Injection", common practice).
"""

from __future__ import annotations

import csv
import io
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from livecurve.cli import main
from livecurve.config.chainfile import load_chain
from livecurve.outputs.clf import clf_text, write_clf
from tests.conftest import require

HERE = Path(__file__).resolve().parent
HOSTILE = HERE / "chains" / "hostile_title.toml"
_ALLOWED = (0x9, 0xA, 0xD)


def _xml_chars_ok(text: str) -> bool:
    for ch in text:
        c = ord(ch)
        if c < 0x20 and c not in _ALLOWED:
            return False
        if 0xD800 <= c <= 0xDFFF or c in (0xFFFE, 0xFFFF):
            return False
    return True


def test_hostile_title_gives_well_formed_clf(tmp_path):
    spec = load_chain(HOSTILE)
    assert "\x01" in spec.title and "<ProcessList>" in spec.title  # the corpus is hostile
    text, _ = clf_text(spec)
    assert _xml_chars_ok(text)
    path = tmp_path / "hostile.clf"
    write_clf(path, spec)
    root = ET.parse(path).getroot()
    assert root.tag == "ProcessList"
    # the title is an attribute value and text, never markup: one ProcessList, no <evil>
    assert [e.tag for e in root.iter() if e.tag in ("ProcessList", "evil")] == ["ProcessList"]
    assert "<ProcessList>" in root.get("name") and "shell touch PWNED" in root.get("name")
    assert "\n" not in root.get("name")  # a line break in the title stays on one line
    descs = [d.text for d in root.findall("Description")]
    assert any("<ProcessList>" in (d or "") for d in descs)


def test_hostile_title_clf_runs_in_opencolorio(tmp_path):
    try:
        import PyOpenColorIO as ocio
    except ImportError:
        ocio = None
    require(ocio is not None, "OpenColorIO (PyPI opencolorio)")
    path = tmp_path / "hostile.clf"
    write_clf(path, load_chain(HOSTILE))
    ft = ocio.FileTransform(src=str(path), interpolation=ocio.INTERP_LINEAR)
    proc = ocio.Config.CreateRaw().getProcessor(ft).getDefaultCPUProcessor()
    img = np.linspace(0, 1, 30, dtype=np.float32).reshape(1, 10, 3).copy()
    proc.applyRGB(img)
    assert np.all(np.isfinite(img))


@pytest.mark.parametrize("args", [["curve", "--csv", "{o}"], ["curve", "--step", "--csv", "{o}"]])
def test_csv_from_hostile_chain_holds_numbers_only(tmp_path, capsys, args):
    out = tmp_path / "o.csv"
    argv = [a.format(o=out) for a in args]
    assert main([argv[0], str(HOSTILE), *argv[1:]]) == 0
    rows = list(csv.reader(io.StringIO(out.read_text())))
    assert all(h.replace("_", "").isalnum() for h in rows[0])  # header: our own names
    for row in rows[1:]:
        for cell in row:
            float(cell)  # every cell is a number
            assert not cell.startswith(("=", "+", "@")), cell
