"""Report figures (matplotlib): files by extension, sizes, not blank, valid SVG, and the
drawn data equal to the numbers written beside them."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import cv2
import numpy as np
import pytest

from livecurve.cli import main
from livecurve.config.chainfile import load_chain, parse_chain
from livecurve.errors import OutputError
from livecurve.outputs import curves
from livecurve.outputs.plots import DPI, channel_style, figure_format, save_figure
from livecurve.outputs.steps import STEP_HEADER, edge_window, step_figure, step_responses

ROOT = Path(__file__).resolve().parents[2]
KNEE = ROOT / "configs" / "night_knee.toml"
FILM = ROOT / "configs" / "film_shoulder.toml"


@pytest.fixture(scope="module")
def film():
    spec = load_chain(FILM)
    vin, vout = curves.curves(spec, points=41)
    return spec, vin, vout


def _not_blank(img: np.ndarray) -> float:
    """Share of pixels that differ from the most common colour (the background)."""
    flat = img.reshape(-1, img.shape[-1])
    vals, counts = np.unique(flat, axis=0, return_counts=True)
    return float(np.any(flat != vals[np.argmax(counts)], axis=1).mean())


def test_curve_png_size_and_content(tmp_path, film):
    spec, vin, vout = film
    out = tmp_path / "c.png"
    curves.write_curve_png(out, vin, vout, spec)
    img = cv2.imread(str(out), cv2.IMREAD_COLOR)
    assert img is not None and img.shape == (600, 960, 3)  # 9.6 × 6 in at 100 dpi
    assert 0.02 < _not_blank(img) < 0.6
    assert len(np.unique(img.reshape(-1, 3), axis=0)) > 50  # text, traces, anti-aliasing


def test_svg_is_valid_xml_and_pdf_is_pdf(tmp_path, film):
    spec, vin, vout = film
    curves.write_curve_png(tmp_path / "c.svg", vin, vout, spec)
    root = ET.parse(tmp_path / "c.svg").getroot()  # raises on malformed XML
    assert root.tag.endswith("svg")
    assert len(root.findall(".//{http://www.w3.org/2000/svg}path")) > 10
    curves.write_curve_png(tmp_path / "c.pdf", vin, vout, spec)
    assert (tmp_path / "c.pdf").read_bytes()[:5] == b"%PDF-"


def test_unknown_extension_refused(tmp_path, film):
    spec, vin, vout = film
    with pytest.raises(OutputError, match=r"\.png, \.svg, \.pdf"):
        curves.write_curve_png(tmp_path / "c.jpg", vin, vout, spec)
    assert not list(tmp_path.iterdir())
    assert figure_format("A.SVG") == "svg"


def test_existing_figure_kept_without_force(tmp_path, film):
    spec, vin, vout = film
    (tmp_path / "c.png").write_text("keep")
    with pytest.raises(OutputError, match="--force"):
        curves.write_curve_png(tmp_path / "c.png", vin, vout, spec, force=False)
    assert (tmp_path / "c.png").read_text() == "keep"


def test_curve_lines_carry_the_csv_numbers(tmp_path, capsys):
    csv, svg = tmp_path / "c.csv", tmp_path / "c.svg"
    assert main(["curve", str(FILM), "--csv", str(csv), "--png", str(svg),
                 "--points", "33"]) == 0
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    spec = load_chain(FILM)
    vin, vout = curves.curves(spec, points=33)
    fig = curves.curve_figure(vin, vout, spec)
    lines = fig.axes[0].get_lines()
    assert len(lines) == 3
    for ch, ln in enumerate(lines):
        # the CSV is written with 9 significant digits
        np.testing.assert_allclose(ln.get_xdata(), data[:, 0], rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(ln.get_ydata(), data[:, ch + 1], rtol=1e-8, atol=1e-12)
    assert ET.parse(svg).getroot().tag.endswith("svg")


def test_equal_channels_stay_distinguishable(film):
    spec, vin, vout = film
    # film_shoulder treats R′, G′, B′ alike: the three curves are identical
    np.testing.assert_array_equal(vout[0], vout[1])
    fig = curves.curve_figure(vin, vout, spec)
    ax = fig.axes[0]
    styles = {(ln.get_color(), ln.get_linestyle()) for ln in ax.get_lines()}
    assert len({s[0] for s in styles}) == 3 and len({s[1] for s in styles}) == 3
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == ["channel 0 (R′)", "channel 1 (G′)", "channel 2 (B′)"]
    assert channel_style(0)["linestyle"] != channel_style(1)["linestyle"]


def test_title_records_chain_temperature_and_knobs():
    spec = load_chain(KNEE)
    vin, vout = curves.curves(spec, points=11, t_kelvin=313.15,
                              live={"knee_current": 80e-6, "black_trim": 0.95})
    fig = curves.curve_figure(vin, vout, spec, t_kelvin=313.15,
                              live={"knee_current": 80e-6, "black_trim": 0.95})
    ax = fig.axes[0]
    title = ax.get_title()
    assert spec.title in title and "40.0 °C" in title
    assert "knee_current = 80 µA" in title and "black_trim = 0.95" in title
    assert "[V]" in ax.get_xlabel() and "[V]" in ax.get_ylabel()
    # without settings: the ambient and the knobs' starting values
    t0 = curves.curve_figure(vin, vout, spec).axes[0].get_title()
    assert "30.0 °C (ambient)" in t0 and "knee_current = 60 µA" in t0


def test_step_figure_whole_and_edge(tmp_path):
    spec = load_chain(KNEE)
    t, y = step_responses(spec)
    period = t[1] - t[0]
    fig = step_figure(t, y, spec, pixel_period_s=period)
    whole, edge = fig.axes[:2]
    assert whole.get_xlabel() == edge.get_xlabel() == "time from the step [ns]"
    assert "[V]" in whole.get_ylabel()
    w0, w1 = whole.get_xlim()
    e0, e1 = edge.get_xlim()
    assert (e1 - e0) < 0.5 * (w1 - w0)  # the edge panel is a close-up
    lo, hi = edge_window(t, y, period)
    assert lo == pytest.approx(-4 * period) and hi >= 16 * period - 1e-15
    # every sample of the edge panel is a sample of the response, one marker per pixel
    for ch, ln in enumerate(edge.get_lines()[:3]):
        sel = (t >= lo - 1e-15) & (t <= hi + 1e-15)
        np.testing.assert_array_equal(ln.get_ydata(), y[ch, sel])
        assert ln.get_marker() == "o"
    for ch, ln in enumerate(whole.get_lines()[:3]):
        np.testing.assert_array_equal(ln.get_ydata(), y[ch])


def test_edge_window_follows_a_slow_channel():
    t = np.arange(-10, 200) * 1e-9
    y = np.zeros((3, t.size))
    y[0, t >= 0] = 1.0  # instant
    y[1] = np.clip(t / 70e-9, 0.0, 1.0)  # a 70 ns ramp
    lo, hi = edge_window(t, y, 1e-9)
    # the ramp is within 10 % of its end from 63 ns; the window ends 8 pixels later
    assert hi == pytest.approx(71e-9, abs=1e-12)
    assert lo == pytest.approx(-4e-9)


def test_cli_step_writes_csv_and_svg(tmp_path, capsys):
    csv, svg = tmp_path / "s.csv", tmp_path / "s.svg"
    assert main(["curve", str(KNEE), "--step", "--csv", str(csv), "--png", str(svg)]) == 0
    assert csv.read_text().splitlines()[0] == STEP_HEADER
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")


def test_save_figure_png_size(tmp_path):
    from livecurve.outputs.plots import new_figure
    fig, ax = new_figure(400, 300)
    ax.plot([0, 1], [0, 1])
    save_figure(tmp_path / "f.png", fig)
    img = cv2.imread(str(tmp_path / "f.png"))
    assert img.shape == (300, 400, 3) and DPI == 100


def test_no_display_needed(tmp_path, film, monkeypatch):
    # figures never open a window: no DISPLAY, still written
    monkeypatch.delenv("DISPLAY", raising=False)
    spec, vin, vout = film
    curves.write_curve_png(tmp_path / "c.png", vin, vout, spec)
    assert (tmp_path / "c.png").stat().st_size > 1000


def test_flat_chain_still_plots(tmp_path):
    raw = {"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                      "r_f": "10k", "channels": [0]}]}
    spec = parse_chain(raw, path="flat.toml")
    vin, vout = curves.curves(spec, points=5)
    curves.write_curve_png(tmp_path / "f.png", vin, vout, spec)
    assert cv2.imread(str(tmp_path / "f.png")).shape == (600, 960, 3)
