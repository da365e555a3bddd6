"""Documented ranges checked where values are read, and messages that quote values the way
they were written.

References: temperatures −55 … +150 °C, the range small-signal silicon parts are specified
over (common practice); the TOML 1.0.0 specification (toml.io: a document is UTF-8; the
byte-order mark some editors write is accepted by livecurve and dropped); SI prefixes as in
the BIPM SI Brochure, 9th ed. (µ for 1e-6).
"""

from __future__ import annotations

import os

import pytest

from livecurve.cli import main
from livecurve.config.chainfile import load_chain
from livecurve.errors import ConfigError, UnitError
from livecurve.units import parse_temperature_k, parse_value
from tests.conftest import ROOT

KNEE = ROOT / "configs" / "night_knee.toml"
BASE = 'space = "rgb"\n[[stage]]\nid = "gain"\nkind = "inverting_gain"\nr_in = "10k"\n' \
       'r_f = "22k"\n'


@pytest.mark.parametrize("text, kelvin", [("-55C", 218.15), ("150C", 423.15), ("25", 298.15),
                                          ("300K", 300.0)])
def test_temperature_ends_of_the_range_are_accepted(text, kelvin):
    assert parse_temperature_k(text, key="t") == pytest.approx(kelvin)


@pytest.mark.parametrize("text", ["1K", "-56C", "150.5C", "424K", "1e9999999", 10 ** 401,
                                  float("nan")])
def test_temperature_outside_the_range_is_refused(text):
    with pytest.raises(UnitError, match="−55 … \\+150 °C") as info:
        parse_temperature_k(text, key="ambient", path="c.toml")
    assert "key 'ambient'" in str(info.value) and "c.toml" in str(info.value)


@pytest.mark.parametrize("text", ["1e9999999", "-1e9999999", "1e9999999k", 10 ** 401])
def test_numbers_beyond_a_double_are_refused_not_crashed(text):
    with pytest.raises(UnitError, match="key 'r_in'"):
        parse_value(text, "ohm", key="r_in")


def test_byte_order_mark_is_accepted(tmp_path):
    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf" + BASE.encode())
    assert load_chain(p).stages[0].id == "gain"


def test_file_source_is_relative_to_the_chain_file(tmp_path, monkeypatch):
    sub = tmp_path / "chains"
    sub.mkdir()
    p = sub / "c.toml"
    p.write_text(BASE + '[live.g]\ntarget = "gain.r_f"\nmin = "10k"\nmax = "47k"\n'
                 '[control.beat]\ndrives = "g"\nsource = "file:beat.wav:gain=2V + '
                 'lfo:sine:2Hz:1V"\n')
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    spec = load_chain(os.path.relpath(p, elsewhere))
    src = spec.controls["beat"].source
    path_part = src.split(" + ")[0]
    assert path_part.startswith("file:") and path_part.endswith(":gain=2V")
    named = path_part[len("file:"):-len(":gain=2V")]
    assert os.path.samefile(os.path.dirname(os.path.abspath(named)), sub)
    assert src.endswith("lfo:sine:2Hz:1V")


def test_absolute_file_source_is_kept(tmp_path):
    p = tmp_path / "c.toml"
    wav = tmp_path / "abs.wav"
    p.write_text(BASE + '[live.g]\ntarget = "gain.r_f"\nmin = "10k"\nmax = "47k"\n'
                 f'[control.beat]\ndrives = "g"\nsource = "file:{wav}"\n')
    assert load_chain(p).controls["beat"].source == f"file:{wav}"


def test_sweep_must_stay_within_the_rails(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text('space = "rgb"\n[sweep]\nto = "1e6V"\n' + BASE.split("\n", 1)[1])
    with pytest.raises(ConfigError) as info:
        load_chain(p)
    msg = str(info.value)
    assert "key 'sweep.to'" in msg and "'1e6V'" in msg and "-12 V … 12 V" in msg


def test_set_outside_the_knob_range_speaks_in_its_units(tmp_path, capsys):
    rc = main(["curve", str(KNEE), "--csv", str(tmp_path / "o.csv"), "--set",
               "knee_current=300uA"])
    err = capsys.readouterr().err
    assert rc == 2
    assert "'300uA'" in err and "50 µA … 200 µA" in err, err
    assert list(tmp_path.iterdir()) == []


def test_the_documented_ends_reach_drift_unrefused():
    # -55 + 273.15 is 218.14999999999998 in binary floating point; the ends stay in range
    from livecurve.analysis.drift import temperature_steps
    temps = temperature_steps(parse_temperature_k("-55C"), parse_temperature_k("150C"), 2)
    assert temps[0] == 218.15 and temps[-1] == 423.15
