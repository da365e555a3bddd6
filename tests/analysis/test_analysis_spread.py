"""Monte Carlo spread: nominal and seeded runs, the analytic tolerance stack-up, ΔE, ranking.

References
----------
* Ratio of two independent resistors, each uniform on ±t (derived here):
  E[1/(1+b)] = ln((1+t)/(1−t))/(2t),  E[1/(1+b)²] = 1/(1−t²),  E[(1+a)²] = 1 + t²/3, so
  Var[(1+a)/(1+b)] = (1 + t²/3)/(1 − t²) − [ln((1+t)/(1−t))/(2t)]²  (exact).
* Each normal with standard deviation σ (3σ = t): Var ≈ 2σ² + 11σ⁴ (series of 1/(1+b)
  with E[b²] = σ², E[b⁴] = 3σ⁴; first order 2σ² is the usual root-sum-square stack-up).
* Standard error of a sample variance: sqrt((m4 − s⁴)/N) (any statistics text).
* CIEDE2000 test pairs: G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 color-difference
  formula", Color Res. Appl. 30(1), 2005, supplementary data (values from memory).
* CIE 1976 L* = 116·(Y/Yn)^(1/3) − 16 (CIE 15); BT.1886 EOTF with black 0: L = V^2.4.
"""

from __future__ import annotations

import io
import json
import math

import cv2
import numpy as np
import pytest

from livecurve.analysis.spread import (
    Tolerances,
    delta_e00,
    grey_lab,
    list_parts,
    monte_carlo,
    run_spread,
)
from livecurve.config.chainfile import load_chain, parse_chain
from livecurve.errors import ConfigError

ROOT = __import__("pathlib").Path(__file__).resolve().parents[2]


def _gain_chain():
    raw = {"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                      "r_f": "20k", "channels": [0]}]}
    return parse_chain(raw, path="gain.toml")


def _demo(name):
    return load_chain(ROOT / "configs" / f"{name}.toml")


def test_zero_tolerance_gives_the_nominal_curve():
    tol = Tolerances(resistor=0.0, is_factor=0.0, beta_factor=0.0)
    res = monte_carlo(_demo("shadow_crush"), trials=5, seed=3, tolerances=tol, points=41)
    np.testing.assert_allclose(res.curves, np.broadcast_to(res.nominal, res.curves.shape),
                               rtol=0, atol=1e-9)
    assert res.delta_e.max() < 1e-6
    assert all(r["effect_mv"] < 1e-6 for r in res.ranking)
    # with real tolerances the same run is far from nominal (the check above can fail)
    res1 = monte_carlo(_demo("shadow_crush"), trials=5, seed=3, points=41, rank=False)
    assert np.abs(res1.curves - res1.nominal).max() > 1e-3


def test_seeded_runs_repeat():
    spec = _demo("night_knee")
    a = monte_carlo(spec, trials=12, seed=42, points=21, rank=False)
    b = monte_carlo(spec, trials=12, seed=42, points=21, rank=False)
    c = monte_carlo(spec, trials=12, seed=43, points=21, rank=False)
    np.testing.assert_array_equal(a.curves, b.curves)
    np.testing.assert_array_equal(a.delta_e, b.delta_e)
    assert np.abs(a.curves - c.curves).max() > 1e-3


def _gain_ratios(res):
    slope = (res.curves[:, 0, -1] - res.curves[:, 0, 0]) / (res.vin[-1] - res.vin[0])
    nom = (res.nominal[0, -1] - res.nominal[0, 0]) / (res.vin[-1] - res.vin[0])
    return slope / nom


def _check_variance(g, var_exact, mean_exact):
    n = g.size
    d = g - g.mean()
    s2 = float((d ** 2).mean())
    m4 = float((d ** 4).mean())
    se = math.sqrt((m4 - s2 ** 2) / n)
    assert abs(s2 - var_exact) < 4 * se, (s2, var_exact, se)
    assert abs(g.mean() - mean_exact) < 4 * math.sqrt(s2 / n)
    return s2, se


def test_uniform_stack_up_matches_analytic():
    t = 0.05
    tol = Tolerances(resistor=t, distribution="uniform")
    res = monte_carlo(_gain_chain(), trials=3000, seed=7, tolerances=tol, points=3,
                      ramp_steps=2, rank=False)
    g = _gain_ratios(res)
    var = (1 + t * t / 3) / (1 - t * t) - (math.log((1 + t) / (1 - t)) / (2 * t)) ** 2
    mean = math.log((1 + t) / (1 - t)) / (2 * t)
    _check_variance(g, var, mean)
    # uniform parts cannot leave the worst-case window
    assert g.min() >= (1 - t) / (1 + t) - 1e-9 and g.max() <= (1 + t) / (1 - t) + 1e-9


def test_gauss_stack_up_matches_root_sum_square():
    sigma = 0.01
    tol = Tolerances(resistor=3 * sigma, distribution="gauss")
    res = monte_carlo(_gain_chain(), trials=3000, seed=11, tolerances=tol, points=3,
                      ramp_steps=2, rank=False)
    g = _gain_ratios(res)
    _check_variance(g, 2 * sigma ** 2 + 11 * sigma ** 4, 1 + sigma ** 2)


def test_sensitivity_of_a_gain_stage():
    # Vout = −(Rf/Rin)·Vin; at |Vin| = 0.5 V: Rf·(1 ± t) moves it by G·t·0.5 V, Rin·(1 − t)
    # by G·(1/(1 − t) − 1)·0.5 V (the larger of Rin's two limits).
    t, gain = 0.05, 2.0
    res = monte_carlo(_gain_chain(), trials=2, seed=1, tolerances=Tolerances(resistor=t),
                      points=3, ramp_steps=2)
    rows = {r["part"]: r for r in res.ranking}
    assert [r["part"] for r in res.ranking] == ["g.RIN", "g.RF"]
    assert rows["g.RF"]["effect_mv"] == pytest.approx(1e3 * gain * t * 0.5, rel=1e-4)
    assert rows["g.RIN"]["effect_mv"] == pytest.approx(1e3 * gain * (1 / (1 - t) - 1) * 0.5,
                                                       rel=1e-4)
    assert rows["g.RIN"]["delta_high_mv"] == pytest.approx(
        1e3 * gain * (1 - 1 / (1 + t)) * 0.5, rel=1e-4)


def test_parts_include_junctions_and_beta():
    parts = list_parts(_demo("night_knee"))
    labels = {(p.channel, p.label) for p in parts}
    assert (0, "knee.Q1 IS") in labels and (0, "knee.Q1 BF") in labels
    assert (0, "restore.RF") in labels
    assert all(p.channel == 0 for p in parts)  # Pb and Pr pass straight through


# All 34 test pairs of G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 color-difference
# formula: implementation notes, supplementary test data, and mathematical observations",
# Color Res. Appl. 30(1), 2005, Table 1 (values typed from memory; every one agrees with
# colour-science to the table's 4 decimals, which is the check that the typing is right).
# They include the pairs built to catch the usual slips: hue-angle wrap at 180° (pairs
# 9–15), a* = 0 (16–24), and dark colours (33–34).
SHARMA_PAIRS = [
    ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
    ((50.0, 3.1571, -77.2803), (50.0, 0.0, -82.7485), 2.8615),
    ((50.0, 2.8361, -74.0200), (50.0, 0.0, -82.7485), 3.4412),
    ((50.0, -1.3802, -84.2814), (50.0, 0.0, -82.7485), 1.0000),
    ((50.0, -1.1848, -84.8006), (50.0, 0.0, -82.7485), 1.0000),
    ((50.0, -0.9009, -85.5211), (50.0, 0.0, -82.7485), 1.0000),
    ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
    ((50.0, -1.0, 2.0), (50.0, 0.0, 0.0), 2.3669),
    ((50.0, 2.4900, -0.0010), (50.0, -2.4900, 0.0009), 7.1792),
    ((50.0, 2.4900, -0.0010), (50.0, -2.4900, 0.0010), 7.1792),
    ((50.0, 2.4900, -0.0010), (50.0, -2.4900, 0.0011), 7.2195),
    ((50.0, 2.4900, -0.0010), (50.0, -2.4900, 0.0012), 7.2195),
    ((50.0, -0.0010, 2.4900), (50.0, 0.0009, -2.4900), 4.8045),
    ((50.0, -0.0010, 2.4900), (50.0, 0.0010, -2.4900), 4.8045),
    ((50.0, -0.0010, 2.4900), (50.0, 0.0011, -2.4900), 4.7461),
    ((50.0, 2.5, 0.0), (50.0, 0.0, -2.5), 4.3065),
    ((50.0, 2.5, 0.0), (73.0, 25.0, -18.0), 27.1492),
    ((50.0, 2.5, 0.0), (61.0, -5.0, 29.0), 22.8977),
    ((50.0, 2.5, 0.0), (56.0, -27.0, -3.0), 31.9030),
    ((50.0, 2.5, 0.0), (58.0, 24.0, 15.0), 19.4535),
    ((50.0, 2.5, 0.0), (50.0, 3.1736, 0.5854), 1.0000),
    ((50.0, 2.5, 0.0), (50.0, 3.2972, 0.0), 1.0000),
    ((50.0, 2.5, 0.0), (50.0, 1.8634, 0.5757), 1.0000),
    ((50.0, 2.5, 0.0), (50.0, 3.2592, 0.3350), 1.0000),
    ((60.2574, -34.0099, 36.2677), (60.4626, -34.1751, 39.4387), 1.2644),
    ((63.0109, -31.0961, -5.8663), (62.8187, -29.7946, -4.0864), 1.2630),
    ((61.2901, 3.7196, -5.3901), (61.4292, 2.2480, -4.9620), 1.8731),
    ((35.0831, -44.1164, 3.7933), (35.0232, -40.0716, 1.5901), 1.8645),
    ((22.7233, 20.0904, -46.6940), (23.0331, 14.9730, -42.5619), 2.0373),
    ((36.4612, 47.8580, 18.3852), (36.2715, 50.5065, 21.2231), 1.4146),
    ((90.8027, -2.0831, 1.4410), (91.1528, -1.6435, 0.0447), 1.4441),
    ((90.9257, -0.5406, -0.9208), (88.6381, -0.8985, -0.7239), 1.5381),
    ((6.7747, -0.2908, -2.4247), (5.8714, -0.0985, -2.2286), 0.6377),
    ((2.0776, 0.0795, -1.1350), (0.9033, -0.0636, -0.5514), 0.9082),
]


def test_published_ciede2000_pairs():
    """The spread analysis' colour difference against Sharma, Wu & Dalal's published
    values (table rounded to 4 decimals: half a unit of the last digit, 5e-5)."""
    a = np.array([p[0] for p in SHARMA_PAIRS])
    b = np.array([p[1] for p in SHARMA_PAIRS])
    want = np.array([p[2] for p in SHARMA_PAIRS])
    np.testing.assert_allclose(delta_e00(a, b), want, atol=5e-5, rtol=0)
    # the formula is symmetric in its two colours (Sharma et al., same paper)
    np.testing.assert_allclose(delta_e00(b, a), want, atol=5e-5, rtol=0)


def test_grey_lab_on_the_reference_display():
    lab = grey_lab(np.array([[0.5, 0.5, 0.5], [1.0, 1.0, 1.0], [0.2, 0.2, 0.2]]))
    y = np.array([0.5, 1.0, 0.2]) ** 2.4
    np.testing.assert_allclose(lab[:, 0], 116 * np.cbrt(y) - 16, atol=1e-9)
    np.testing.assert_allclose(lab[:, 1:], 0.0, atol=1e-9)


def test_identical_channels_put_no_cast_on_grey():
    spec = _demo("film_shoulder")  # three identical boards, no per-channel overrides
    same = monte_carlo(spec, trials=20, seed=5, mismatch=False, points=11, rank=False)
    assert same.cast.max() < 1e-6
    assert same.delta_e.max() > 0.1  # lightness still moves
    diff = monte_carlo(spec, trials=20, seed=5, mismatch=True, points=11, rank=False)
    assert np.median(diff.cast.max(axis=1)) > 0.1


def test_nominal_cast_of_trimmed_boards():
    # shadow_crush's boards differ as built (channel overrides): a cast even without spread
    res = monte_carlo(_demo("shadow_crush"), trials=1, seed=0, points=11, rank=False,
                      tolerances=Tolerances(resistor=0.0, is_factor=0.0, beta_factor=0.0))
    assert res.cast_nominal.max() > 0.5
    assert res.cast.max() == pytest.approx(res.cast_nominal.max(), abs=1e-6)


def test_run_spread_outputs(tmp_path, capsys):
    spec = _demo("shadow_crush")
    rep = run_spread(spec, trials=8, seed=2, csv=tmp_path / "s.csv", json=tmp_path / "s.json",
                     png=tmp_path / "s.png", progress=True, points=31)
    err = capsys.readouterr().err
    assert "8/8 trials" in err
    lines = (tmp_path / "s.csv").read_text().splitlines()
    assert lines[0].startswith("input_v,nom0_v,min0_v,max0_v,std0_v,nom1_v")
    data = np.loadtxt(tmp_path / "s.csv", delimiter=",", skiprows=1)
    assert data.shape == (31, 13)
    assert np.all(data[:, 2] <= data[:, 3])  # min ≤ max
    summary = json.loads((tmp_path / "s.json").read_text())
    assert summary["trials"] == 8 and summary["seed"] == 2
    assert summary["ranking"][0]["effect_mv"] >= summary["ranking"][-1]["effect_mv"]
    img = cv2.imread(str(tmp_path / "s.png"))
    assert img.shape[1] == 960 and img.shape[0] > 3 * 260
    assert any("ΔE00" in ln for ln in rep.lines())
    run_spread(spec, trials=2, seed=2, json=tmp_path / "q.json", progress=False, points=5)
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize("kw,key", [({"trials": 0}, "--trials"), ({"trials": 2.5}, "--trials"),
                                    ({"trials": 2, "seed": -1}, "--seed")])
def test_bad_runs(kw, key):
    with pytest.raises(ConfigError, match=key):
        monte_carlo(_gain_chain(), **kw)


@pytest.mark.parametrize("tol,key", [(Tolerances(distribution="triangle"), "distribution"),
                                     (Tolerances(resistor=-0.01), "resistor"),
                                     (Tolerances(is_factor=float("nan")), "is_factor")])
def test_bad_tolerances(tol, key):
    with pytest.raises(ConfigError, match=key):
        monte_carlo(_gain_chain(), trials=2, tolerances=tol)


def test_spread_figure_draws_the_csv_and_ranking(tmp_path):
    from livecurve.analysis.spread import spread_csv_text, spread_figure
    spec = _demo("shadow_crush")
    res = monte_carlo(spec, trials=6, seed=3, points=21)
    fig = spread_figure(res, spec)
    assert len(fig.axes) == 4
    data = np.loadtxt(io.StringIO(spread_csv_text(res)), delimiter=",", skiprows=1)
    for c in range(3):
        ax = fig.axes[c]
        plus, minus = ax.get_lines()[:2]
        # +1σ / −1σ lines are the CSV's std column in mV
        np.testing.assert_allclose(plus.get_ydata(), data[:, 4 + 4 * c] * 1e3, rtol=1e-7,
                                   atol=1e-9)
        np.testing.assert_allclose(minus.get_ydata(), -data[:, 4 + 4 * c] * 1e3, rtol=1e-7,
                                   atol=1e-9)
        assert ax.get_ylabel() == "deviation [mV]" and ax.get_xlabel() == "input [V]"
    bars = fig.axes[3].patches
    top = res.ranking[:12]
    assert len(bars) == len(top)
    # bars are drawn top-down in ranking order
    widths = [b.get_width() for b in sorted(bars, key=lambda b: -b.get_y())]
    np.testing.assert_allclose(widths, [r["effect_mv"] for r in top])
    assert "6 trials" in fig.get_suptitle() and "seed 3" in fig.get_suptitle()
