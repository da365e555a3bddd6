"""The ``--control`` grammar: every accepted form and the errors for the rest."""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.control import AudioFile, Constant, Lfo, Sum, parse_amount, parse_source
from livecurve.control.spec import ACCEPTED_FORMS
from livecurve.errors import ConfigError, MediaError, UnitError
from tests.control._wav import write_wav

T_S = np.linspace(-0.5, 3.0, 701)


@pytest.mark.parametrize("text, unit, want", [
    # SI prefixes: BIPM, The International System of Units, 9th ed. (2019), Table 7.
    ("0.5V", "V", 0.5), ("500mV", "V", 0.5), ("-350mV", "V", -0.35), ("2", "Hz", 2.0),
    ("1.5kHz", "Hz", 1500.0), ("2MHz", "Hz", 2e6), ("250uV", "V", 250e-6),
    ("250µV", "V", 250e-6), ("3nV", "V", 3e-9), ("90deg", "deg", 90.0), (" 1e-3 V ", "V", 1e-3),
    ("+.25", "V", 0.25), ("4.7k", "Hz", 4700.0),
])
def test_amounts(text, unit, want):
    assert parse_amount(text, unit) == pytest.approx(want, rel=1e-15)


@pytest.mark.parametrize("text, unit", [("1.2A", "V"), ("abc", "V"), ("", "Hz"), ("2 Hzz", "Hz"),
                                        ("1e999", "V"), ("5xV", "V")])
def test_bad_amounts(text, unit):
    with pytest.raises(UnitError) as err:
        parse_amount(text, unit, key="lfo rate")
    assert "lfo rate" in str(err.value) and repr(text) in str(err.value)


def _same(a, b):
    np.testing.assert_array_equal(a.values_at(T_S), b.values_at(T_S))


def test_const_forms():
    _same(parse_source("const:1.2V"), Constant(1.2))
    _same(parse_source("const:-350mV"), Constant(-0.35))
    _same(parse_source("CONST:0.7"), Constant(0.7))


def test_lfo_forms():
    _same(parse_source("lfo:sine:2Hz:0.5V"), Lfo("sine", 2.0, 0.5))
    _same(parse_source("lfo:Triangle:1.5kHz:250mV"), Lfo("triangle", 1500.0, 0.25))
    _same(parse_source("lfo:steps:4Hz:0.2V:offset=0.1V:phase=90deg:seed=7"),
          Lfo("steps", 4.0, 0.2, offset_v=0.1, phase_deg=90, seed=7))


def test_sum_forms():
    s = parse_source("lfo:sine:2Hz:0.5V + const:1.2V+lfo:square:1Hz:0.1V")
    assert isinstance(s, Sum) and len(s.sources) == 3
    want = Lfo("sine", 2, 0.5).values_at(T_S) + 1.2 + Lfo("square", 1, 0.1).values_at(T_S)
    np.testing.assert_allclose(s.values_at(T_S), want, rtol=0, atol=1e-15)
    # a '+' inside a number is not a sum
    _same(parse_source("const:+1e+0V"), Constant(1.0))


def test_names_parse_back_to_the_same_source():
    for src in [Constant(-0.125), Lfo("ramp", 0.3, 2.0, offset_v=-1, phase_deg=45.5, seed=11),
                Sum([Lfo("steps", 3, 0.2, seed=5), Constant(0.5)])]:
        _same(parse_source(src.name), src)


def test_file_and_clip_forms(tmp_path):
    x = np.stack([np.arange(-3000, 3000, 3), np.arange(3000, -3000, -3)], axis=1)
    wav = write_wav(tmp_path / "beat.wav", x, 48000)
    t = np.arange(0, 2000) / 48000
    s = parse_source(f"file:{tmp_path / 'beat.wav'}")
    assert isinstance(s, AudioFile)
    np.testing.assert_allclose(s.values_at(t), wav.mean(axis=1) / 32768, rtol=0, atol=1e-7)
    s = parse_source(f"file:{tmp_path / 'beat.wav'}:channel=1:gain=2V")
    np.testing.assert_array_equal(s.values_at(t), 2.0 * wav[:, 1] / 32768)
    s = parse_source("clip:channel=0", clip_path=tmp_path / "beat.wav")
    np.testing.assert_array_equal(s.values_at(t), wav[:, 0] / 32768)
    s = parse_source(f"file:{tmp_path / 'beat.wav'}+const:1V")
    assert isinstance(s, Sum) and s.sample_rate_hz == 48000.0


def test_file_errors_name_the_path(tmp_path):
    missing = tmp_path / "nope.wav"
    with pytest.raises(MediaError, match="nope.wav"):
        parse_source(f"file:{missing}")
    with pytest.raises(ConfigError, match="no clip"):
        parse_source("clip")


@pytest.mark.parametrize("spec", [
    "bogus", "lfo:sine:2Hz", "lfo:sine:2Hz:1V:0.5V", "const", "const:1V:2V", "file:",
    "device:", "clip:beat.wav", "const:1V+bogus", "lfo:sine:2Hz:0.5V:gain=2V",
    "const:1V:offset=1V", "+const:1V",
])
def test_unknown_forms_list_the_accepted_ones(spec):
    with pytest.raises(ConfigError) as err:
        parse_source(spec)
    msg = str(err.value)
    assert spec in msg
    assert ACCEPTED_FORMS in msg


@pytest.mark.parametrize("spec, needle", [
    ("lfo:wobble:1Hz:1V", "sine, triangle, square, ramp, steps"),
    ("const:1.2A", "'1.2A'"),
    ("lfo:sine:fastHz:1V", "'fastHz'"),
    ("lfo:steps:1Hz:1V:seed=-3", "'-3'"),
    ("file:x.wav:channel=left", "'left'"),
    ("", "accepted forms"),
])
def test_bad_values_are_named(spec, needle):
    with pytest.raises(ConfigError) as err:
        parse_source(spec)
    assert needle in str(err.value)
