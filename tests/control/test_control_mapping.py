"""Control maps and component converters against Ohm's law, Shockley's law and CODATA."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants

from livecurve.control import (
    AudioFile,
    Constant,
    ControlMap,
    ControlSource,
    JunctionCurrentSource,
    Lfo,
    Linear,
    ResistorToCurrent,
    Sum,
    follow,
    thermal_voltage,
)
from livecurve.errors import ConfigError
from tests.control._wav import write_wav

RATE = 48000
#: Relative tolerance for closed-form converter values (float64).
TOL_REL = 1e-13
#: Envelope agreement with closed forms / a direct follow() run, V.
TOL_ENV_V = 1e-10


def test_thermal_voltage_matches_codata():
    # REFERENCES.md: VT = kT/q = 25.852 mV at 300 K, 25.865 mV at 300.15 K (CODATA k, q);
    # scipy.constants carries CODATA 2018 (k, e exact since the 2019 SI).
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, abs=0.5e-6)
    assert thermal_voltage(300.15) == pytest.approx(25.865e-3, abs=0.5e-6)
    for t in (250.0, 300.15, 400.0):
        assert thermal_voltage(t) == pytest.approx(scipy.constants.k * t / scipy.constants.e,
                                                   rel=1e-15)


def test_junction_source_follows_shockley():
    # Shockley (1949): I = IS·exp(V/(n·VT)), forward bias ("−1" dropped), VT from scipy's CODATA.
    v = np.linspace(-0.2, 0.75, 40)
    for is_a, n, t in [(1e-14, 1.0, 300.15), (2.5e-15, 1.8, 330.0), (1e-16, 1.0, 273.15)]:
        conv = JunctionCurrentSource(is_a, n=n, t_kelvin=t)
        vt = scipy.constants.k * t / scipy.constants.e
        np.testing.assert_allclose(conv(v), is_a * np.exp(v / (n * vt)), rtol=TOL_REL)
        assert conv(0.0) == pytest.approx(is_a, rel=TOL_REL)
    assert conv.unit == "A"


def test_junction_decade_step():
    # REFERENCES.md: VBE rises by VT·ln10 = 59.53 mV per decade of current at 300 K
    # (matched-pair log-conformance data sheets quote ≈ 59 mV at 25 °C).
    conv = JunctionCurrentSource(1e-14, t_kelvin=300.0)
    i1, i2 = conv(np.array([0.55, 0.55 + 59.53e-3]))
    assert i2 / i1 == pytest.approx(10.0, rel=2e-4)  # 59.53 is rounded to 10 µV
    two = JunctionCurrentSource(1e-14, n=2.0, t_kelvin=300.0)
    j1, j2 = two(np.array([0.55, 0.55 + 2 * 59.53e-3]))
    assert j2 / j1 == pytest.approx(10.0, rel=2e-4)


def test_junction_source_stays_finite():
    conv = JunctionCurrentSource(1e-14)
    out = conv(np.array([30.0, 1e6]))
    assert np.all(np.isfinite(out)) and out[0] == out[1]


def test_resistor_and_linear_converters():
    # Ohm's law: I = (V − Vref)/R
    conv = ResistorToCurrent(10e3, v_ref=0.1)
    np.testing.assert_allclose(conv(np.array([1.1, 0.1, -0.9])), [100e-6, 0.0, -100e-6],
                               rtol=TOL_REL, atol=1e-20)
    lin = Linear(scale=-2.0, offset_v=0.5)
    np.testing.assert_allclose(lin(np.array([0.0, 1.0])), [0.5, -1.5], rtol=TOL_REL)
    assert conv.unit == "A" and lin.unit == "V"


@pytest.mark.parametrize("make, key", [
    (lambda: ResistorToCurrent(0.0), "r_ohm"), (lambda: ResistorToCurrent(-5.0), "r_ohm"),
    (lambda: JunctionCurrentSource(0.0), "is_a"), (lambda: JunctionCurrentSource(1e-14, n=0),
                                                   "'n'"),
    (lambda: JunctionCurrentSource(1e-14, t_kelvin=-3), "t_kelvin"),
    (lambda: Linear(scale=float("nan")), "scale"),
])
def test_bad_converter_values(make, key):
    with pytest.raises(ConfigError) as err:
        make()
    assert key in str(err.value)


def test_gain_offset_and_converter_chain():
    src = Lfo("sine", 3.0, 0.4)
    t = np.linspace(0, 1, 500)
    m = ControlMap(src, gain=2.0, offset_v=0.1, converter=ResistorToCurrent(1e3))
    np.testing.assert_allclose(m.values_at(t), (2 * src.values_at(t) + 0.1) / 1e3, rtol=TOL_REL)
    assert m.unit == "A" and ControlMap(src).unit == "V"
    m = ControlMap(src, converter=JunctionCurrentSource(1e-14, t_kelvin=300.15))
    np.testing.assert_allclose(
        m.values_at(t),
        1e-14 * np.exp(src.values_at(t) / (scipy.constants.k * 300.15 / scipy.constants.e)),
        rtol=TOL_REL)


def test_envelope_of_a_step_on_the_uniform_grid():
    # A constant source switched on at t = 0 charges the envelope like the analog RC:
    # 1 − exp(−t/τa), read at grid times k/48 kHz as t = (k+1)/48 kHz (see envelope.py).
    m = ControlMap(Constant(1.0), envelope=(2.0, 100.0))
    assert m.envelope_rate_hz == 48000.0
    k = np.arange(0, 40000, 7)
    np.testing.assert_allclose(m.values_at(k / RATE), 1 - np.exp(-(k + 1) / (RATE * 2e-3)),
                               rtol=0, atol=TOL_ENV_V)
    # between grid points: linear interpolation of the neighbours
    mid = m.values_at((k + 0.5) / RATE)
    np.testing.assert_allclose(mid, 0.5 * (m.values_at(k / RATE) + m.values_at((k + 1) / RATE)),
                               rtol=0, atol=1e-15)
    assert m.values_at(-1.0) == m.values_at(0.0)
    assert ControlMap(Constant(1.0), envelope=(2.0, 100.0), grid_hz=8000).envelope_rate_hz == 8000


@pytest.fixture(scope="module")
def burst(tmp_path_factory):
    # tone bursts: 1 kHz at 0.8 FS for 50 ms every 200 ms, 1.2 s long
    n = int(1.2 * RATE)
    t = np.arange(n) / RATE
    gate = (np.mod(t, 0.2) < 0.05).astype(float)
    x = np.round(0.8 * 32767 * np.sin(2 * np.pi * 1000 * t) * gate)
    path = tmp_path_factory.mktemp("burst") / "burst.wav"
    write_wav(path, x, RATE)
    return path, x / 32768


def test_envelope_runs_on_the_audio_samples(burst):
    path, x = burst
    src = AudioFile(path)
    m = ControlMap(src, envelope=(1.0, 30.0), gain=2.0)
    assert m.envelope_rate_hz == src.sample_rate_hz
    want, _ = follow(x, rate_hz=RATE, attack_ms=1.0, release_ms=30.0)
    k = np.arange(x.size)
    np.testing.assert_allclose(m.values_at(k / RATE), 2.0 * want, rtol=0, atol=TOL_ENV_V)
    # sums containing audio run at the audio rate too
    assert ControlMap(Sum([src, Lfo()]), envelope=(1.0, 30.0)).envelope_rate_hz == RATE


def test_envelope_values_do_not_depend_on_query_order(burst):
    path, _ = burst
    src = Sum([AudioFile(path), Lfo("steps", 9.0, 0.1, seed=2)])
    t = np.sort(np.random.default_rng(3).uniform(-0.1, 1.3, 3000))
    once = ControlMap(src, envelope=(0.5, 12.0)).values_at(t)
    m = ControlMap(src, envelope=(0.5, 12.0))
    m._track.cached_chunks = 2  # force recomputation from remembered chunk states
    order = np.random.default_rng(4).permutation(t.size)
    got = np.empty_like(t)
    for part in np.array_split(order, 37):
        got[part] = m.values_at(t[part])
    np.testing.assert_array_equal(got, once)


def test_far_seek_equals_sequential_run():
    src = Lfo("square", 0.5, 1.0)
    far = ControlMap(src, envelope=(20.0, 500.0))
    seq = ControlMap(src, envelope=(20.0, 500.0))
    t = np.linspace(0, 30, 3001)
    seq_vals = np.concatenate([seq.values_at(t[i:i + 100]) for i in range(0, t.size, 100)])
    np.testing.assert_array_equal(far.values_at(t[::-1])[::-1], seq_vals)


class _Arriving(ControlSource):
    """A live-like source: samples appear as `arrived` grows; later times hold the last."""

    is_live = True
    sample_rate_hz = float(RATE)

    def __init__(self, x):
        self.x, self.arrived, self.name = x, 0, "arriving"

    def available_until_s(self):
        return self.arrived / RATE

    def values_at(self, t_s):
        k = np.clip(np.round(np.asarray(t_s) * RATE).astype(int), 0, max(self.arrived - 1, 0))
        return self.x[k] if self.arrived else np.zeros(np.shape(t_s))


def test_live_envelope_grows_with_the_samples(burst):
    _, x = burst
    src = _Arriving(x)
    m = ControlMap(src, envelope=(1.0, 30.0))
    want, _ = follow(x, rate_hz=RATE, attack_ms=1.0, release_ms=30.0)
    assert np.all(m.values_at([0.0, 0.5]) == 0.0)  # nothing yet
    for arrived in (1000, 5000, 5001, 20000, 57600):
        src.arrived = arrived
        k = np.arange(arrived)
        np.testing.assert_allclose(m.values_at(k / RATE), want[:arrived], rtol=0,
                                   atol=TOL_ENV_V)
        # times past the newest sample hold the newest envelope value
        assert m.values_at(10.0) == pytest.approx(want[arrived - 1], abs=TOL_ENV_V)


def test_per_line_gives_one_value_per_row():
    # 1080p30 rows: 1125 lines at a 33.75 kHz line rate (SMPTE ST 274, REFERENCES.md)
    m = ControlMap(Lfo("sine", 50.0, 0.3), gain=1.5)
    rows = 1.0 + np.arange(1125) / 33750.0
    out = m.per_line(rows)
    assert out.shape == (1125,) and out.dtype == np.float64 and out.flags.c_contiguous
    np.testing.assert_array_equal(out, m.values_at(rows))
    with pytest.raises(ConfigError, match="1-D"):
        m.per_line(rows.reshape(25, 45))


@pytest.mark.parametrize("kwargs, key", [
    ({"envelope": (1.0,)}, "envelope"), ({"envelope": (1.0, -2.0)}, "envelope"),
    ({"envelope": "fast"}, "envelope"), ({"gain": float("inf")}, "gain"),
    ({"converter": 3.0}, "converter"), ({"offset_v": "x"}, "offset_v"),
])
def test_bad_map_settings(kwargs, key):
    with pytest.raises(ConfigError) as err:
        ControlMap(Constant(1.0), **kwargs)
    assert key in str(err.value)
    with pytest.raises(ConfigError, match="source"):
        ControlMap(1.0)
