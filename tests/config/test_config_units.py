"""Values with units as engineers write them (livecurve.units).

SI prefixes: BIPM, The International System of Units, 9th ed. (2019), Table 7; ``meg`` is
SPICE's spelling of mega (Nagel 1975).  The "R notation" (4k7 = 4.7 k, 2R2 = 2.2 Ω) is
common practice on schematics and BOMs (IEC 60062 letter-and-numeral code, from memory).
"""

from __future__ import annotations

import pytest

from livecurve.errors import ConfigError, UnitError
from livecurve.units import format_value, parse_temperature_k, parse_value


@pytest.mark.parametrize("text, unit, want", [
    ("10k", "ohm", 10e3), ("10kΩ", "ohm", 10e3), ("10 kohm", "ohm", 10e3),
    ("4k7", "ohm", 4.7e3), ("2R2", "ohm", 2.2), ("1M5", "ohm", 1.5e6),
    ("1meg", "ohm", 1e6), ("1MEG", "ohm", 1e6), ("1M", "ohm", 1e6), ("470", "ohm", 470.0),
    ("4.7uA", "A", 4.7e-6), ("4.7µA", "A", 4.7e-6), ("60uA", "A", 60e-6), ("1e-14", "A", 1e-14),
    ("25f", "A", 25e-15), ("2mA", "A", 2e-3),
    ("2.2n", "F", 2.2e-9), ("2.2nF", "F", 2.2e-9), ("10mF", "F", 10e-3), ("1F", "F", 1.0),
    ("-12V", "V", -12.0), ("+12V", "V", 12.0), ("0.5V", "V", 0.5), ("-350mV", "V", -0.35),
    ("10m", "V", 0.01), (".5", "V", 0.5), ("0", "V", 0.0),
    ("150MHz", "Hz", 150e6), ("200V/us", "V/us", 200.0), ("1.11eV", "eV", 1.11),
    ("10ns", "s", 10e-9), ("40K/W", "K/W", 40.0),
    ("200k", "", 200e3), (2e5, "", 2e5), (3, "ohm", 3.0),
])
def test_parse_value(text, unit, want):
    assert parse_value(text, unit) == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize("text, unit", [
    ("10kV", "ohm"),  # wrong unit symbol
    ("4.7uF", "A"), ("12A", "V"), ("35C", "V"), ("1Hz", "s"), ("12 volts", "V"),
    ("abc", "ohm"), ("", "V"), ("10k k", "ohm"), ("1e999", "V"), ("nan", "V"), ("4k7k", "ohm"),
])
def test_parse_value_refuses(text, unit):
    with pytest.raises(UnitError) as err:
        parse_value(text, unit, key="stage[0].r_in", path="chain.toml")
    msg = str(err.value)
    assert "chain.toml" in msg and "stage[0].r_in" in msg and repr(text) in msg
    assert isinstance(err.value, ConfigError)  # UnitError is a ConfigError


@pytest.mark.parametrize("value", [True, None, [1], float("inf")])
def test_parse_value_refuses_non_numbers(value):
    with pytest.raises(UnitError, match="opamp.a_ol"):
        parse_value(value, "", key="opamp.a_ol")


def test_wrong_symbol_names_what_fits():
    with pytest.raises(UnitError, match="expected .*ohm"):
        parse_value("10kV", "ohm", key="r")


@pytest.mark.parametrize("text, kelvin", [
    ("35C", 308.15), ("35 °C", 308.15), ("35°C", 308.15), ("35degC", 308.15), ("-40C", 233.15),
    ("300K", 300.0), ("308.15K", 308.15), (25, 298.15), (0.0, 273.15), ("27", 300.15),
])
def test_parse_temperature(text, kelvin):
    # 0 °C = 273.15 K (SI Brochure, 9th ed., 2.3.1)
    assert parse_temperature_k(text) == pytest.approx(kelvin, abs=1e-12)


@pytest.mark.parametrize("text", ["-300C", "0K", "-5K", "35F", "warm", True, None])
def test_parse_temperature_refuses(text):
    with pytest.raises(UnitError) as err:
        parse_temperature_k(text, key="ambient", path="c.toml")
    assert "ambient" in str(err.value) and "c.toml" in str(err.value)


@pytest.mark.parametrize("x, unit, text", [
    (4.7e-6, "A", "4.7 µA"), (10e3, "ohm", "10 kΩ"), (1e-14, "A", "10 fA"), (-12.0, "V", "-12 V"),
    (150e6, "Hz", "150 MHz"), (0.0, "V", "0 V"),
])
def test_format_value(x, unit, text):
    assert format_value(x, unit) == text


@pytest.mark.parametrize("x", [4.7e-6, 12.0, 2.2e-9, 1.5e6, 0.35])
def test_format_parse_round_trip(x):
    # 4 significant digits survive the round trip
    assert parse_value(format_value(x, "").replace(" ", ""), "") == pytest.approx(x, rel=1e-4)


@pytest.mark.parametrize("text, unit, literal", [
    ("200uA", "A", 200e-6), ("60uA", "A", 60e-6), ("2.2n", "F", 2.2e-9), ("4k7", "ohm", 4.7e3),
    ("0.3m", "V", 0.3e-3), ("40K/W", "K/W", 40.0),
])
def test_prefix_scaling_is_correctly_rounded(text, unit, literal):
    # the result is the double nearest the decimal value (IEEE 754 round-to-nearest), the same
    # as Python's own literal, so "200uA" prints as 0.0002 in messages, not 0.00019999999999999998
    assert parse_value(text, unit) == literal
