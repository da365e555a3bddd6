"""Decoded codes ↔ centred volts and the output converter (livecurve.signal.levels).

References: colour-science (``colour.RGB_to_YCbCr`` / ``colour.YCbCr_to_RGB``, PyPI) for the
matrices and the converter's Y′CbCr quantisation; analog levels Y′ 0…700 mV, Pb/Pr ±350 mV
(SMPTE ST 274 analog interface, REFERENCES.md); permitted code extents 8-bit 1…254, 10-bit
4…1019 (ITU-R BT.709-6 quantisation levels).
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecurve.errors import ConfigError, MediaError, SolverError
from livecurve.signal.component import STANDARDS
from livecurve.signal.levels import (
    codes_to_volts,
    converter_is_exact,
    converter_limits_v,
    volts_to_codes,
)
from tests.signal._colour_ref import colour_module, weights

#: Agreement of float32 volts with a float64 reference: float32 carries 0.35 V to ~3e-8 V.
VOLT_TOL = 1e-7
JIT = not numba.config.DISABLE_JIT


def _random_codes(h, w, dtype, seed=0, max_code=None):
    info = np.iinfo(dtype)
    hi = info.max if max_code is None else max_code
    img = np.random.default_rng(seed).integers(0, hi + 1, (h, w, 3), dtype=dtype)
    img[0, :8] = [[0, 0, 0], [hi, hi, hi], [hi, 0, 0], [0, hi, 0], [0, 0, hi],
                  [hi, hi, 0], [0, hi, hi], [hi, 0, hi]]
    return img


def _reference_volts(rgb, standard, space, max_code):
    """Centred volts computed with colour-science (float64)."""
    colour = colour_module()
    x = rgb.astype(np.float64) / max_code
    if space == "rgb":
        return np.moveaxis(x * 0.7 - 0.35, -1, 0)
    ypbpr = colour.RGB_to_YCbCr(x, K=weights(standard), out_legal=False, out_int=False)
    ypbpr = ypbpr * 0.7  # Y′ 0…0.7 V, Pb/Pr ±0.35 V (SMPTE ST 274 analog levels)
    ypbpr[..., 0] -= 0.35  # zero-centred Y′
    return np.moveaxis(ypbpr, -1, 0)


# --------------------------------------------------------------------------- codes → volts


@pytest.mark.parametrize("standard", STANDARDS)
@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
@pytest.mark.parametrize("dtype", [np.uint8, np.uint16])
def test_codes_to_volts_matches_colour_science(standard, space, dtype):
    # Reference: colour.RGB_to_YCbCr(out_legal=False) gives Y′ 0…1, Pb/Pr ±0.5; scaled to the
    # analog levels of SMPTE ST 274 (Y′ 700 mV, Pb/Pr ±350 mV) and centred.
    rgb = _random_codes(37, 53, dtype)
    max_code = np.iinfo(dtype).max
    got = codes_to_volts(rgb, space=space, standard=standard)
    assert got.dtype == np.float32 and got.shape == (3, 37, 53) and got.flags.c_contiguous
    ref = _reference_volts(rgb, standard, space, max_code)
    np.testing.assert_allclose(got, ref, rtol=0, atol=VOLT_TOL)


def test_codes_to_volts_reference_levels():
    # SMPTE ST 274 analog levels: black 0 V, white 700 mV on Y′; Pb/Pr ±350 mV for pure blue /
    # pure red (Pb = +0.5 for B′ = 1 in BT.709: (B′ − Y′)/(2(1 − Kb)) = 0.5).
    rgb = np.array([[[0, 0, 0], [255, 255, 255], [0, 0, 255], [255, 0, 0]]], dtype=np.uint8)
    v = codes_to_volts(rgb, space="ypbpr", standard="bt709")
    np.testing.assert_allclose(v[0, 0, :2], [-0.35, 0.35], atol=VOLT_TOL)  # centred Y′
    np.testing.assert_allclose(v[1:, 0, :2], 0.0, atol=VOLT_TOL)  # greys carry no Pb/Pr
    assert v[1, 0, 2] == pytest.approx(0.35, abs=VOLT_TOL)  # blue: Pb = +350 mV
    assert v[2, 0, 3] == pytest.approx(0.35, abs=VOLT_TOL)  # red: Pr = +350 mV


def test_ten_bit_codes_in_uint16_words():
    # 10-bit codes 0…1023 carried in uint16: code 1023 is white (700 mV).
    rgb = _random_codes(9, 11, np.uint16, max_code=1023)
    v = codes_to_volts(rgb, space="rgb", standard="bt709", bits=10)
    np.testing.assert_allclose(v, np.moveaxis(rgb / 1023.0 * 0.7 - 0.35, -1, 0), atol=VOLT_TOL)
    back = volts_to_codes(v, space="rgb", standard="bt709", out_dtype=np.uint16, out_bits=10,
                          converter_bits=12)
    np.testing.assert_array_equal(back, rgb)
    with pytest.raises(MediaError, match="1023"):
        codes_to_volts(rgb + 1, space="rgb", standard="bt709", bits=10)


def test_codes_to_volts_out_is_reused_and_strided_input_accepted():
    rgb = _random_codes(20, 30, np.uint8)
    out = np.empty((3, 20, 30), np.float32)
    got = codes_to_volts(rgb, space="ypbpr", standard="bt601", out=out)
    assert got is out
    # A non-contiguous view gives the same numbers as its contiguous copy.
    big = _random_codes(40, 30, np.uint8, seed=5)
    np.testing.assert_array_equal(codes_to_volts(big[::2], space="ypbpr", standard="bt601"),
                                  codes_to_volts(big[::2].copy(), space="ypbpr",
                                                 standard="bt601"))


# --------------------------------------------------------------------------- output converter


def _reference_converter(planes, standard, space, cbits, legal, out_max):
    """The output converter built from colour-science: volts → R′G′B′ → Y′CbCr int codes
    (colour.RGB_to_YCbCr out_int=True) → R′G′B′ (colour.YCbCr_to_RGB in_int=True) → word."""
    colour = colour_module()
    v = np.moveaxis(planes.astype(np.float64), 0, -1)
    if space == "rgb":
        # R′G′B′ on the Y′ levels (colour.CV_range), rounded with BT.2100 Round; the output
        # word is then an exact rational (code − lo)·out_max/span, rounded half up in integer
        # arithmetic so that exact halves are not left to float noise.
        lo, hi = (int(x) for x in colour.CV_range(cbits, legal, True))
        codes = colour.models.rgb.ycbcr.round_BT2100(lo + (v + 0.35) / 0.7 * (hi - lo))
        codes = np.clip(codes, 2 ** (cbits - 8) if legal else 0,
                        2 ** cbits - 2 ** (cbits - 8) if legal else 2 ** cbits - 1)
        num = np.clip(codes.astype(np.int64) - lo, 0, hi - lo) * out_max
        return (2 * num + (hi - lo)) // (2 * (hi - lo))
    else:
        ypbpr = v / 0.7
        ypbpr[..., 0] += 0.5
        rgb = colour.YCbCr_to_RGB(ypbpr, K=weights(standard), in_legal=False, in_int=False)
        codes = colour.RGB_to_YCbCr(rgb, K=weights(standard), out_bits=cbits, out_legal=legal,
                                    out_int=True)
        rgb = colour.YCbCr_to_RGB(codes, K=weights(standard), in_bits=cbits, in_legal=legal,
                                  in_int=True)
    return colour.models.rgb.ycbcr.round_BT2100(np.clip(rgb, 0, 1) * out_max)


@pytest.mark.parametrize("standard", STANDARDS)
@pytest.mark.parametrize("space", ["ypbpr", "rgb"])
@pytest.mark.parametrize("cbits,legal", [(8, True), (10, True), (10, False), (12, True)])
def test_volts_to_codes_matches_colour_science_converter(standard, space, cbits, legal):
    # Reference: the same converter assembled from colour-science calls (see helper).  Random
    # in-gamut R′G′B′ (float, not on any code grid) so no value sits on a rounding tie.
    colour = colour_module()
    rng = np.random.default_rng(11)
    rgb = rng.random((31, 29, 3))
    if space == "rgb":
        planes = np.moveaxis(rgb * 0.7 - 0.35, -1, 0).astype(np.float32)
    else:
        ypbpr = colour.RGB_to_YCbCr(rgb, K=weights(standard), out_legal=False, out_int=False)
        ypbpr[..., 0] -= 0.5
        planes = np.moveaxis(ypbpr * 0.7, -1, 0).astype(np.float32)
    for dtype, out_max in ((np.uint8, 255), (np.uint16, 65535)):
        got = volts_to_codes(planes, space=space, standard=standard, converter_bits=cbits,
                             converter_legal=legal, out_dtype=dtype)
        assert got.dtype == dtype and got.shape == (31, 29, 3)
        ref = _reference_converter(planes, standard, space, cbits, legal, out_max)
        np.testing.assert_array_equal(got, ref)


def test_exact_half_codes_round_up():
    # ITU-R BT.2100 Round(): exact halves round up.  Mid-grey (0 V centred) in a 10-bit
    # full-range converter sits on code 511.5 → 512 → (512/1023)·255 = 127.62 → word 128; a
    # 9-bit legal converter puts it on code 251 → 0.5 → 127.5 → word 128, for every channel.
    planes = np.zeros((3, 1, 1), np.float32)
    for cbits, legal in ((10, False), (9, True)):
        for space in ("ypbpr", "rgb"):
            got = volts_to_codes(planes, space=space, standard="bt709", converter_bits=cbits,
                                 converter_legal=legal)
            np.testing.assert_array_equal(got[0, 0], [128, 128, 128])


def test_converter_quantisation_is_visible_at_8_bits():
    # An 8-bit legal converter has 220 Y′ levels for 256 output words: a fine grey ramp comes
    # out with gaps (missing words), a 10-bit converter leaves none.
    ramp = np.linspace(-0.35, 0.35, 4096, dtype=np.float32)
    planes = np.zeros((3, 1, ramp.size), np.float32)
    planes[0, 0] = ramp
    coarse = volts_to_codes(planes, space="ypbpr", standard="bt709", converter_bits=8)
    fine = volts_to_codes(planes, space="ypbpr", standard="bt709", converter_bits=10)
    assert len(np.unique(coarse[0, :, 0])) == 220  # codes 16…235 (BT.709 8-bit Y′)
    assert len(np.unique(fine[0, :, 0])) == 256


def test_converter_limits_values():
    # ITU-R BT.709-6: the permitted extent is 1…254 (8-bit) / 4…1019 (10-bit); Y′ black 16/64,
    # white 235/940; Cb/Cr mid 128/512, span 224/896.  Centred volts = code position × 0.7 V.
    lim = converter_limits_v("ypbpr", converter_bits=10, converter_legal=True)
    assert lim.shape == (3, 2)
    np.testing.assert_allclose(lim[0], [(4 - 64) / 876 * 0.7 - 0.35,
                                        (1019 - 64) / 876 * 0.7 - 0.35])
    np.testing.assert_allclose(lim[1], [(4 - 512) / 896 * 0.7, (1019 - 512) / 896 * 0.7])
    lim8 = converter_limits_v("rgb", converter_bits=8, converter_legal=True)
    np.testing.assert_allclose(lim8, [[(1 - 16) / 219 * 0.7 - 0.35,
                                       (254 - 16) / 219 * 0.7 - 0.35]] * 3)
    # Full range with colour-science's chroma convention: Pb code = 128 + 255·Pb, codes 0…255.
    full = converter_limits_v("ypbpr", converter_bits=8, converter_legal=False)
    np.testing.assert_allclose(full[0], [-0.35, 0.35])
    np.testing.assert_allclose(full[1], [-128 / 255 * 0.7, 127 / 255 * 0.7])


def test_converter_clips_at_its_limits():
    # R′G′B′ through a full-range 8-bit converter into 8-bit words: the word follows the
    # converter code one to one, so the clip points are visible and must equal the limits.
    lim = converter_limits_v("rgb", converter_bits=8, converter_legal=False)
    v = np.array([lim[0, 0] - 1.0, lim[0, 0], lim[0, 0] + 0.7 / 255, lim[0, 1] - 0.7 / 255,
                  lim[0, 1], lim[0, 1] + 1.0, np.inf, -np.inf], dtype=np.float32)
    planes = np.broadcast_to(v, (3, 1, v.size)).copy()
    got = volts_to_codes(planes, space="rgb", standard="bt709", converter_bits=8,
                         converter_legal=False)
    np.testing.assert_array_equal(got[0, :, 0], [0, 0, 1, 254, 255, 255, 255, 0])


def test_out_is_reused_without_allocation():
    planes = codes_to_volts(_random_codes(16, 24, np.uint8), space="ypbpr", standard="bt709")
    out = np.empty((16, 24, 3), np.uint8)
    got = volts_to_codes(planes, space="ypbpr", standard="bt709", out=out)
    assert got is out
    with pytest.raises(ConfigError, match="out"):
        volts_to_codes(planes, space="ypbpr", standard="bt709", out=np.empty((16, 24, 3)))
    with pytest.raises(ConfigError, match="out"):
        codes_to_volts(out, space="ypbpr", standard="bt709", out=np.empty((3, 16, 24)))


def test_float64_planes_are_accepted():
    planes = codes_to_volts(_random_codes(8, 8, np.uint8), space="rgb", standard="bt709")
    a = volts_to_codes(planes, space="rgb", standard="bt709")
    b = volts_to_codes(planes.astype(np.float64), space="rgb", standard="bt709")
    np.testing.assert_array_equal(a, b)


def test_nan_raises_solver_error_with_position():
    planes = np.zeros((3, 4, 5), np.float32)
    planes[1, 2, 3] = np.nan
    with pytest.raises(SolverError, match=r"channel 1, row 2, column 3"):
        volts_to_codes(planes, space="ypbpr", standard="bt709")


@settings(max_examples=60, deadline=None, database=None)
@given(standard=st.sampled_from(STANDARDS), cbits=st.integers(8, 14), legal=st.booleans(),
       lo=st.floats(-0.5, 0.5), hi=st.floats(-0.5, 0.5))
def test_grey_ramp_is_monotonic(standard, cbits, legal, lo, hi):
    # Physics: a rising Y′ with Pb = Pr = 0 never gives a darker output word.
    lo, hi = min(lo, hi), max(lo, hi)
    planes = np.zeros((3, 1, 257), np.float32)
    planes[0, 0] = np.linspace(lo, hi, 257)
    got = volts_to_codes(planes, space="ypbpr", standard=standard, converter_bits=cbits,
                         converter_legal=legal)
    assert np.all(np.diff(got[0, :, 0].astype(int)) >= 0)
    assert np.all(got[0, :, 0] == got[0, :, 1]) and np.all(got[0, :, 1] == got[0, :, 2])


# --------------------------------------------------------------------------- round trips


@pytest.fixture(scope="module")
def all_8bit_colours():
    """Every 8-bit R′G′B′ colour once (4096 × 4096 × 3); a 1-in-7 sample per channel (plus
    0 and 255) when numba's JIT is disabled, where the full set would take hours."""
    if JIT:
        a = np.arange(2 ** 24, dtype=np.uint32)
        img = np.stack([a >> 16, (a >> 8) & 255, a & 255], -1).astype(np.uint8)
        return img.reshape(4096, 4096, 3)
    vals = np.unique(np.r_[np.arange(0, 256, 7), 255]).astype(np.uint8)
    g = np.stack(np.meshgrid(vals, vals, vals, indexing="ij"), -1)
    return g.reshape(vals.size, -1, 3)


@pytest.mark.parametrize("standard", STANDARDS)
def test_every_8bit_colour_round_trips_exactly(all_8bit_colours, standard):
    # Design rule (levels module docstring): a converter at least as fine as the input gives
    # codes → volts → codes exactly through an identity chain.  Default converter: Y′CbCr
    # 10-bit legal (BT.709-6 SDI codes); also 10-bit full range, and R′G′B′ converters.
    img = all_8bit_colours
    for space, cases in (("ypbpr", [(10, True), (10, False), (12, True)]),
                         ("rgb", [(8, False), (10, True)])):
        volts = codes_to_volts(img, space=space, standard=standard)
        out = np.empty_like(img)
        for cbits, legal in cases:
            assert converter_is_exact(8, space=space, standard=standard, converter_bits=cbits,
                                      converter_legal=legal)
            volts_to_codes(volts, space=space, standard=standard, converter_bits=cbits,
                           converter_legal=legal, out=out)
            n_bad = int(np.count_nonzero((out != img).any(axis=-1)))
            assert n_bad == 0, (space, cbits, legal, n_bad)
        if space == "ypbpr":
            # An 8-bit legal Y′CbCr converter cannot be exact: 220·225·225 ≈ 11.1 M codes for
            # 16.8 M colours (BT.709-6 8-bit levels), so the test above is not vacuous.
            assert not converter_is_exact(8, space=space, standard=standard, converter_bits=8)
            volts_to_codes(volts, space=space, standard=standard, converter_bits=8, out=out)
            assert np.count_nonzero((out != img).any(axis=-1)) > 0


@pytest.mark.parametrize("standard", STANDARDS)
def test_16bit_round_trip(standard):
    # 16-bit words need an 18-bit Y′CbCr converter (bound in converter_is_exact); 16 and 17
    # bits lose codes.  R′G′B′: a full-range 16-bit converter is the identity.
    n = 256 if JIT else 64
    img = _random_codes(n, n, np.uint16, seed=3)
    v = codes_to_volts(img, space="ypbpr", standard=standard)
    for cbits, legal, exact in ((18, True, True), (18, False, True), (20, True, True),
                                (16, True, False), (17, True, False)):
        assert converter_is_exact(16, space="ypbpr", standard=standard, converter_bits=cbits,
                                  converter_legal=legal) == exact
        got = volts_to_codes(v, space="ypbpr", standard=standard, converter_bits=cbits,
                             converter_legal=legal, out_dtype=np.uint16)
        assert np.array_equal(got, img) == exact, (cbits, legal)
    vr = codes_to_volts(img, space="rgb", standard=standard)
    got = volts_to_codes(vr, space="rgb", standard=standard, converter_bits=16,
                         converter_legal=False, out_dtype=np.uint16)
    np.testing.assert_array_equal(got, img)


@pytest.mark.skipif(not JIT, reason="a 1080p frame in interpreted Python takes minutes")
def test_1080p_round_trip_with_defaults():
    img = _random_codes(1080, 1920, np.uint8, seed=9)
    v = np.empty((3, 1080, 1920), np.float32)
    out = np.empty_like(img)
    codes_to_volts(img, space="ypbpr", standard="bt709", out=v)
    volts_to_codes(v, space="ypbpr", standard="bt709", out=out)
    np.testing.assert_array_equal(out, img)


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize("kwargs,match", [
    ({"space": "yuv", "standard": "bt709"}, "space"),
    ({"space": "ypbpr", "standard": "bt470"}, "standard"),
    ({"space": "ypbpr", "standard": "bt709", "bits": 17}, "bits"),
    ({"space": "ypbpr", "standard": "bt709", "bits": 9}, "bits"),  # 9 bits in a uint8 word
])
def test_codes_to_volts_bad_arguments(kwargs, match):
    with pytest.raises(ConfigError, match=match):
        codes_to_volts(np.zeros((2, 2, 3), np.uint8), **kwargs)


@pytest.mark.parametrize("rgb", [np.zeros((2, 2, 3), np.float32), np.zeros((2, 2, 4), np.uint8),
                                 np.zeros((2, 2), np.uint8), np.zeros((0, 2, 3), np.uint8),
                                 [[[0, 0, 0]]]])
def test_codes_to_volts_bad_frames(rgb):
    with pytest.raises(ConfigError, match="rgb"):
        codes_to_volts(rgb, space="rgb", standard="bt709")


@pytest.mark.parametrize("kwargs,match", [
    ({"space": "hsv"}, "space"),
    ({"standard": "ntsc"}, "standard"),
    ({"converter_bits": 6}, "converter_bits"),
    ({"converter_bits": 10.5}, "converter_bits"),
    ({"converter_legal": "no"}, "converter_legal"),
    ({"out_dtype": np.float32}, "out_dtype"),
    ({"out_dtype": "nonsense"}, "out_dtype"),
    ({"out_dtype": np.uint8, "out_bits": 10}, "out_bits"),
])
def test_volts_to_codes_bad_arguments(kwargs, match):
    args = {"space": "ypbpr", "standard": "bt709"} | kwargs
    with pytest.raises(ConfigError, match=match):
        volts_to_codes(np.zeros((3, 2, 2), np.float32), **args)


@pytest.mark.parametrize("planes", [np.zeros((2, 2, 3), np.float32), np.zeros((3, 2, 2), np.int16),
                                    np.zeros((3, 0, 2), np.float32)])
def test_volts_to_codes_bad_planes(planes):
    with pytest.raises(ConfigError, match="planes"):
        volts_to_codes(planes, space="ypbpr", standard="bt709")


def test_converter_helpers_bad_arguments():
    with pytest.raises(ConfigError, match="space"):
        converter_limits_v("cmyk")
    with pytest.raises(ConfigError, match="converter_bits"):
        converter_limits_v("rgb", converter_bits=4)
    with pytest.raises(ConfigError, match="input_bits"):
        converter_is_exact(18, space="rgb", standard="bt709")
