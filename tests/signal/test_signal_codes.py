"""Y′CbCr code ranges and code conversion (livecurve.signal.codes) against outside sources.

References: ITU-R BT.601 / BT.709-6 / BT.2020 quantisation levels; colour-science
(``colour.RGB_to_YCbCr``, ``colour.models.rgb.ycbcr.ranges_YCbCr``) as the reference tool;
75 % colour bars from /work/shared/REFERENCES.md (computed from BT.709, SMPTE RP 219 defines HD
bars).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.errors import ConfigError, LivecurveError
from livecurve.signal.codes import (
    MAX_BITS,
    MIN_BITS,
    code_range,
    codes_to_ypbpr,
    round_half_away,
    ypbpr_to_codes,
)
from livecurve.signal.component import STANDARDS, rgb_to_ypbpr_matrix, ypbpr_to_rgb_matrix
from tests.signal._colour_ref import colour_module, weights

#: Matrix agreement with colour-science (both float64 evaluations of the same formulas).
MATRIX_TOL = 1e-12
#: Distance from a half code (in codes) within which rounding is float noise.
TIE_TOL = 1e-9


def _rgb_samples(n: int = 4000, seed: int = 7) -> np.ndarray:
    """Random R′G′B′ in [0, 1] plus the cube's corners and a grey ramp."""
    rng = np.random.default_rng(seed)
    corners = np.array([[r, g, b] for r in (0, 1) for g in (0, 1) for b in (0, 1)], float)
    greys = np.repeat(np.linspace(0, 1, 101)[:, None], 3, axis=1)
    return np.concatenate([corners, greys, rng.random((n, 3))])


@pytest.mark.parametrize("standard", STANDARDS)
def test_matrix_matches_colour_science(standard):
    # Reference: colour.RGB_to_YCbCr with out_legal=False, out_int=False gives Y′ 0…1 and
    # Pb/Pr ±0.5 (colour-science; ITU-R BT.601 / BT.709-6 / BT.2020 luma weights).
    colour = colour_module()
    rgb = _rgb_samples(500)
    ref = colour.RGB_to_YCbCr(rgb, K=weights(standard), out_legal=False, out_int=False)
    ours = rgb @ rgb_to_ypbpr_matrix(standard).T
    np.testing.assert_allclose(ours, ref, rtol=0, atol=MATRIX_TOL)


@pytest.mark.parametrize("standard", STANDARDS)
def test_inverse_matrix(standard):
    # The inverse is written out (component.ypbpr_to_rgb_matrix): check it against colour's
    # colour.YCbCr_to_RGB (in_legal=False) and against a numerical inverse.
    colour = colour_module()
    ypbpr = _rgb_samples(300) @ rgb_to_ypbpr_matrix(standard).T
    ref = colour.YCbCr_to_RGB(ypbpr, K=weights(standard), in_legal=False, in_int=False)
    np.testing.assert_allclose(ypbpr @ ypbpr_to_rgb_matrix(standard).T, ref, atol=MATRIX_TOL)
    np.testing.assert_allclose(ypbpr_to_rgb_matrix(standard),
                               np.linalg.inv(rgb_to_ypbpr_matrix(standard)), atol=MATRIX_TOL)
    # Invariant: a grey comes back bit for bit (Y′ column exactly 1).
    assert np.all(ypbpr_to_rgb_matrix(standard)[:, 0] == 1.0)


@pytest.mark.parametrize("bits", [8, 10, 12])
@pytest.mark.parametrize("legal", [True, False])
def test_code_range_matches_colour_science(bits, legal):
    # Reference: colour.models.rgb.ycbcr.ranges_YCbCr(bits, legal, is_int=True) returns
    # (Y_min, Y_max, C_min, C_max) — colour-science's convention for legal and full range.
    colour = colour_module()
    ref = colour.models.rgb.ycbcr.ranges_YCbCr(bits, legal, True)
    cr = code_range(bits, legal=legal)
    assert (cr.y_lo, cr.y_hi, cr.c_lo, cr.c_hi) == tuple(float(v) for v in ref)
    assert cr.c_mid == (ref[2] + ref[3]) / 2
    assert cr.max_code == 2 ** bits - 1


def test_code_levels_of_the_standards():
    # ITU-R BT.601 / BT.709-6: 8-bit Y′ 16–235, Cb/Cr 16–240 centred on 128; codes 0 and 255
    # reserved for timing references, so a signal may use 1–254.
    cr8 = code_range(8, legal=True)
    assert (cr8.y_lo, cr8.y_hi, cr8.c_lo, cr8.c_hi, cr8.c_mid) == (16, 235, 16, 240, 128)
    assert (cr8.valid_lo, cr8.valid_hi) == (1, 254)
    # ITU-R BT.709-6 / BT.2020 10-bit: Y′ 64–940, Cb/Cr 64–960 around 512; 0–3 and 1020–1023
    # reserved (REFERENCES.md lists 64–940 "from memory for BT.709"; BT.2020 states it).
    cr10 = code_range(10, legal=True)
    assert (cr10.y_lo, cr10.y_hi, cr10.c_lo, cr10.c_hi, cr10.c_mid) == (64, 940, 64, 960, 512)
    assert (cr10.valid_lo, cr10.valid_hi) == (4, 1019)
    # ITU-R BT.2020 12-bit: Y′ 256–3760, C 256–3840 around 2048; 0–15 and 4080–4095 reserved
    # (from memory).
    cr12 = code_range(12, legal=True)
    assert (cr12.y_lo, cr12.y_hi, cr12.c_mid) == (256, 3760, 2048)
    assert (cr12.valid_lo, cr12.valid_hi) == (16, 4079)
    # Full range uses every code (colour-science convention, see the test above).
    full = code_range(10, legal=False)
    assert (full.valid_lo, full.valid_hi, full.c_mid) == (0, 1023, 512)


@pytest.mark.parametrize("standard", STANDARDS)
@pytest.mark.parametrize("bits", [8, 10, 12])
@pytest.mark.parametrize("legal", [True, False])
def test_codes_match_colour_science(standard, bits, legal):
    # Reference: colour.RGB_to_YCbCr(..., K=WEIGHTS_YCBCR[...], out_bits, out_legal,
    # out_int=True), which rounds half up (BT.2100 Round) and clamps to 0…2^bits−1.
    colour = colour_module()
    rgb = _rgb_samples()
    ref = colour.RGB_to_YCbCr(rgb, K=weights(standard), out_bits=bits, out_legal=legal,
                              out_int=True)
    ypbpr = rgb @ rgb_to_ypbpr_matrix(standard).T
    ours = ypbpr_to_codes(ypbpr, bits=bits, legal=legal)
    # Values that are mathematically exact half codes (corners in full range, some greys) are
    # decided by float64 rounding noise in either program: allow one code there, only there.
    exact = ypbpr_to_codes(ypbpr, bits=bits, legal=legal, quantise=False)
    tie = np.abs(exact - np.floor(exact) - 0.5) < TIE_TOL
    np.testing.assert_array_equal(ours[~tie], ref[~tie])
    assert np.all(np.abs(ours[tie] - ref[tie]) <= 1)
    assert tie.sum() < 0.01 * tie.size


@pytest.mark.parametrize("standard", STANDARDS)
def test_codes_from_8bit_integer_rgb_match_colour_science(standard):
    # Reference: colour.RGB_to_YCbCr with in_bits=8, in_int=True for every 8-bit grey and a
    # sample of colours, 10-bit legal output (SDI codes).
    colour = colour_module()
    rng = np.random.default_rng(3)
    rgb8 = np.concatenate([np.repeat(np.arange(256)[:, None], 3, axis=1),
                           rng.integers(0, 256, (5000, 3))])
    ref = colour.RGB_to_YCbCr(rgb8, K=weights(standard), in_bits=8, in_int=True, out_bits=10,
                              out_legal=True, out_int=True)
    ours = ypbpr_to_codes((rgb8 / 255.0) @ rgb_to_ypbpr_matrix(standard).T, bits=10, legal=True)
    np.testing.assert_array_equal(ours, ref)


def test_bt709_75_percent_bars_8bit():
    # REFERENCES.md "Video standards": 75 % colour bars, BT.709, 8-bit Y′/Cb/Cr (computed from
    # BT.709 at 75 % amplitude; SMPTE RP 219 defines HD bars).
    bars = {  # R′G′B′ at 75 %                   expected Y′, Cb, Cr
        "white": ((0.75, 0.75, 0.75), (180, 128, 128)),
        "yellow": ((0.75, 0.75, 0.0), (168, 44, 136)),
        "cyan": ((0.0, 0.75, 0.75), (145, 147, 44)),
        "green": ((0.0, 0.75, 0.0), (133, 63, 52)),
        "magenta": ((0.75, 0.0, 0.75), (63, 193, 204)),
        "red": ((0.75, 0.0, 0.0), (51, 109, 212)),
        "blue": ((0.0, 0.0, 0.75), (28, 212, 120)),
    }
    m = rgb_to_ypbpr_matrix("bt709")
    for name, (rgb, expected) in bars.items():
        got = ypbpr_to_codes(m @ np.array(rgb), bits=8, legal=True)
        assert tuple(int(v) for v in got) == expected, name


@pytest.mark.parametrize("legal", [True, False])
def test_quantise_clips_to_permitted_codes(legal):
    # Overrange Y′PbPr clips to the permitted extent (BT.709-6: 8-bit legal 1…254; full
    # range 0…255), never into reserved codes.
    cr = code_range(8, legal=legal)
    far = np.array([[2.0, 1.0, -1.0], [-1.0, -1.0, 1.0]])
    got = ypbpr_to_codes(far, bits=8, legal=legal)
    assert got.min() == cr.valid_lo and got.max() == cr.valid_hi
    np.testing.assert_array_equal(got, [[cr.valid_hi, cr.valid_hi, cr.valid_lo],
                                        [cr.valid_lo, cr.valid_lo, cr.valid_hi]])


def test_rounding_is_half_away_from_zero():
    # ITU-R BT.2100 Round(x) = Sign(x)·Floor(|x| + 0.5); colour-science's round_BT2100 is the
    # reference implementation.
    colour = colour_module()
    x = np.array([-2.5, -1.5, -0.5, 0.49999999, 0.5, 1.5, 2.5, 3.4999, 1023.5])
    np.testing.assert_array_equal(round_half_away(x), colour.models.rgb.ycbcr.round_BT2100(x))
    # A half code rounds up: Y′ exactly half a code above black.
    cr = code_range(8, legal=True)
    got = ypbpr_to_codes(np.array([0.5 / cr.y_span, 0.0, 0.0]), bits=8, legal=True)
    assert got[0] == 17


@settings(max_examples=200, deadline=None, database=None)
@given(bits=st.integers(MIN_BITS, MAX_BITS), legal=st.booleans(),
       y=st.floats(-0.2, 1.2), pb=st.floats(-0.6, 0.6), pr=st.floats(-0.6, 0.6))
def test_unquantised_codes_invert_exactly(bits, legal, y, pb, pr):
    # Invariant: codes_to_ypbpr ∘ ypbpr_to_codes(quantise=False) is the identity (affine maps).
    x = np.array([y, pb, pr])
    back = codes_to_ypbpr(ypbpr_to_codes(x, bits=bits, legal=legal, quantise=False),
                          bits=bits, legal=legal)
    np.testing.assert_allclose(back, x, rtol=0, atol=1e-12)


@settings(max_examples=200, deadline=None, database=None)
@given(bits=st.integers(MIN_BITS, MAX_BITS), legal=st.booleans(),
       y=st.floats(0, 1), pb=st.floats(-0.5, 0.5), pr=st.floats(-0.5, 0.5))
def test_quantised_codes_are_within_half_a_code(bits, legal, y, pb, pr):
    # Invariant: quantisation moves an in-range value by at most half a code.
    x = np.array([y, pb, pr])
    exact = ypbpr_to_codes(x, bits=bits, legal=legal, quantise=False)
    q = ypbpr_to_codes(x, bits=bits, legal=legal)
    assert np.all(q == np.round(q))
    assert np.all(np.abs(q - exact) <= 0.5 + 1e-9)


def test_float32_stays_float32():
    x = np.array([[0.5, 0.1, -0.1]], dtype=np.float32)
    assert ypbpr_to_codes(x).dtype == np.float32
    assert codes_to_ypbpr(ypbpr_to_codes(x)).dtype == np.float32
    assert ypbpr_to_codes(x.astype(np.float64)).dtype == np.float64
    assert codes_to_ypbpr(np.array([[64, 512, 512]], dtype=np.uint16)).dtype == np.float64


def test_codes_to_ypbpr_of_reference_levels():
    # BT.709-6 10-bit: black 64 → 0, white 940 → 1, Cb/Cr 64 → −0.5, 960 → +0.5.
    got = codes_to_ypbpr(np.array([[64, 64, 960], [940, 512, 512]]), bits=10, legal=True)
    np.testing.assert_allclose(got, [[0.0, -0.5, 0.5], [1.0, 0.0, 0.0]], atol=0)


@pytest.mark.parametrize("bits", [7, 21, 10.0, "10", True, None])
def test_bad_bits_raise_config_error(bits):
    with pytest.raises(ConfigError, match="bits"):
        code_range(bits, legal=True)


@pytest.mark.parametrize("bad", [np.zeros((4, 2)), np.array([[np.nan, 0, 0]]),
                                 np.array([[np.inf, 0, 0]]), np.array([["a", "b", "c"]])])
def test_bad_arrays_raise_config_error(bad):
    with pytest.raises(ConfigError):
        ypbpr_to_codes(bad)
    with pytest.raises(LivecurveError):
        codes_to_ypbpr(bad)


def test_bad_legal_flag_raises():
    with pytest.raises(ConfigError, match="legal"):
        code_range(10, legal="yes")
