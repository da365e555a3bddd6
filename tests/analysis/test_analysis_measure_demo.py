"""The README's table of demo-chain measurement reports is what ``measure`` gives today.

A promise in the README is a test: every figure in the table is re-measured and must agree to
the digits printed (half a unit of the last printed digit).
"""

from __future__ import annotations

import re

import pytest

from livecurve.analysis.measure import make_bench, measure
from livecurve.config.chainfile import load_chain
from tests.conftest import ROOT

HEADER = "| chain | channel | DC gain |"


def _table_rows():
    lines = (ROOT / "README.md").read_text(encoding="utf-8").splitlines()
    start = next(i for i, ln in enumerate(lines) if ln.startswith(HEADER))
    rows = []
    for ln in lines[start + 2:]:
        if not ln.startswith("|"):
            break
        rows.append([c.strip() for c in ln.strip("|").split("|")])
    return rows


def _num(text: str):
    """First number in a cell (Unicode minus understood), with its count of decimals."""
    m = re.search(r"[−+-]?\d+(?:\.(\d+))?", text)
    if m is None:
        return None, 0
    return float(m.group(0).replace("−", "-")), len(m.group(1) or "")


def _agree(cell: str, value, scale: float = 1.0):
    want, dec = _num(cell)
    if want is None:
        assert value is None, (cell, value)
        return
    assert value is not None, cell
    assert value * scale == pytest.approx(want, abs=0.5 * 10 ** -dec + 1e-9), (cell, value)


ROWS = _table_rows()
NAMES = {"R′": 0, "G′": 1, "B′": 2, "Y′": 0, "Pb": 1, "Pr": 2}


@pytest.fixture(scope="module")
def reports():
    return {n: measure(make_bench(load_chain(ROOT / "configs" / f"{n}.toml")))
            for n in sorted({r[0] for r in ROWS})}


@pytest.mark.parametrize("row", ROWS, ids=[f"{r[0]}-{r[1]}" for r in ROWS])
def test_readme_row(row, reports):
    assert len(ROWS) == 6
    rep = reports[row[0]]
    for name in row[1].split(", "):
        c = rep["channels"][NAMES[name]]
        assert c["name"] == name
        _agree(row[2], c["dc_gain"])
        _agree(row[3], c["dc_offset_mv"])
        _agree(row[4], c["f_3db_hz"], 1e-6)
        _agree(row[5], c["delay_ns"])
        _agree(row[6], c["multiburst"][-1]["gain_db"])
        _agree(row[7], c["pulse_bar_pct"])
        _agree(row[8], c["overshoot_pct"])
        _agree(row[9], c["nonlinearity_pct"])
        lo, hi = (row[10].replace("±", "−").split(" … ") + [None])[:2]
        if hi is None:  # "±350 mV"
            _agree(row[10], -c["trough_mv"])
            _agree(row[10].replace("±", ""), c["peak_mv"])
        else:
            _agree(lo, c["trough_mv"])
            _agree(hi, c["peak_mv"])
        fails = {k for k, v in c["checks"].items() if not v["pass"]}
        words = {"flatness": "flatness_db", "−3 dB": "f_3db_hz", "overshoot": "overshoot_pct",
                 "non-linearity": "nonlinearity_pct", "levels": "level_excess_mv",
                 "pulse/bar": "pulse_bar_pct", "delay": "delay_vs_ch0_ns",
                 "gain": "gain_vs_ch0_pct"}
        listed = {v for k, v in words.items() if re.search(rf"(^|[ ,(]){re.escape(k)}", row[11])}
        assert fails == listed, (row[0], name, fails, listed)
