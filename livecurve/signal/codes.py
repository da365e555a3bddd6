"""Y′CbCr digital code ranges of ITU-R BT.601, BT.709 and BT.2020.

Sources
-------
* Legal ("narrow", "studio") range, 8 bits: Y′ codes 16…235, Cb/Cr codes 16…240 centred on
  128; codes 0 and 255 are reserved for timing references, so a legal signal may use codes
  1…254 (ITU-R BT.601 and BT.709-6, digital representation).  Each extra bit multiplies every
  level by 2: 10 bits give Y′ 64…940, Cb/Cr 64…960 around 512 and a permitted extent of 4…1019
  (BT.709-6, BT.2020 for 10 and 12 bits).  Depths the standards do not list (9, 11, 13…20 bits)
  follow the same scaling; they exist here to model finer output converters.
* Full range: Y′ codes 0…2^n−1; Cb/Cr centred on 2^(n−1) with a span of 2^n−1 codes, so
  Pb = ±0.5 maps to 0.5 and 2^n−0.5 before clipping to 0…2^n−1.  This is the convention of
  colour-science's ``colour.RGB_to_YCbCr(..., out_legal=False, out_int=True)`` (its
  ``ranges_YCbCr``), which the tests compare against.
* Quantisation rounds half away from zero (Round(x) = Sign(x)·Floor(|x| + 0.5) of ITU-R
  BT.2100; the same rounding colour-science applies to integer output).  A value that is
  mathematically an exact half code (full-range Pb = −0.5 lands on code 0.5; Y′ = 0.3 at 12
  bits on 1228.5) is decided by the last bit of the float64 product, so two correct
  implementations may differ by one code there.

The normalised signal used on both sides is Y′ 0…1 and Pb/Pr −0.5…+0.5 (the R′G′B′ → Y′PbPr
matrix of :mod:`livecurve.signal.component`).  The same Y′ levels also serve legal-range
R′G′B′ codes (BT.709-6 quantises R′G′B′ like Y′).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from livecurve.errors import ConfigError

#: Bit depths accepted for code values.  BT.601/BT.709 define 8 and 10 bits, BT.2020 10 and
#: 12 bits; the others extend the same scaling (used to model finer output converters).
MIN_BITS = 8
MAX_BITS = 20


@dataclass(frozen=True)
class CodeRange:
    """Code levels of one Y′CbCr quantisation (bit depth and range).

    Attributes
    ----------
    bits : int
        Bits per code value.
    legal : bool
        True for legal (narrow) range, False for full range.
    y_lo, y_hi : float
        Codes of Y′ = 0 (black) and Y′ = 1 (nominal peak white).
    c_lo, c_hi : float
        Codes of Pb/Pr = −0.5 and +0.5 before clipping (0.5 and 2^n−0.5 in full range).
    c_mid : float
        Code of Pb/Pr = 0, the midpoint of *c_lo* and *c_hi*.
    max_code : int
        Largest code a word of *bits* bits can hold, 2^bits − 1.
    """

    bits: int
    legal: bool
    y_lo: float
    y_hi: float
    c_lo: float
    c_hi: float
    c_mid: float
    max_code: int

    @property
    def y_span(self) -> float:
        """Codes between black and nominal white (219·2^(n−8) legal, 2^n−1 full)."""
        return self.y_hi - self.y_lo

    @property
    def c_span(self) -> float:
        """Codes between Pb/Pr = −0.5 and +0.5 (224·2^(n−8) legal, 2^n−1 full)."""
        return self.c_hi - self.c_lo

    @property
    def valid_lo(self) -> int:
        """Lowest code a signal may carry: 2^(n−8) in legal range (0…2^(n−8)−1 are reserved
        for timing references), 0 in full range."""
        return 2 ** (self.bits - 8) if self.legal else 0

    @property
    def valid_hi(self) -> int:
        """Highest code a signal may carry: 2^n − 2^(n−8) − 1 legal (254 at 8 bits, 1019 at
        10 bits), 2^n − 1 full."""
        return self.max_code - 2 ** (self.bits - 8) if self.legal else self.max_code


def check_bits(bits: object, *, key: str = "bits") -> int:
    """Return *bits* as an int in MIN_BITS…MAX_BITS, or raise ConfigError naming *key*."""
    if isinstance(bits, bool) or not isinstance(bits, (int, np.integer)) \
            or not MIN_BITS <= int(bits) <= MAX_BITS:
        raise ConfigError(f"bit depth must be an integer from {MIN_BITS} to {MAX_BITS} "
                          "(8 and 10 for BT.601/BT.709, 10 and 12 for BT.2020)",
                          key=key, value=bits)
    return int(bits)


def code_range(bits: int, *, legal: bool) -> CodeRange:
    """Code levels of *bits*-bit Y′CbCr in legal or full range.

    Parameters
    ----------
    bits : int
        Bits per code, 8…20 (see :data:`MIN_BITS`, :data:`MAX_BITS`).
    legal : bool
        Legal range (8-bit Y′ 16…235, C 16…240 around 128, scaled by 2^(bits−8)) or full
        range (Y′ 0…2^bits−1, C centred on 2^(bits−1) with span 2^bits−1).

    Returns
    -------
    CodeRange
    """
    bits = check_bits(bits)
    if not isinstance(legal, (bool, np.bool_)):
        raise ConfigError("legal must be true or false", key="legal", value=legal)
    max_code = 2 ** bits - 1
    if legal:
        k = 2.0 ** (bits - 8)
        y_lo, y_hi, c_lo, c_hi = 16.0 * k, 235.0 * k, 16.0 * k, 240.0 * k
    else:
        y_lo, y_hi, c_lo, c_hi = 0.0, float(max_code), 0.5, max_code + 0.5
    return CodeRange(bits=bits, legal=bool(legal), y_lo=y_lo, y_hi=y_hi, c_lo=c_lo, c_hi=c_hi,
                     c_mid=(c_lo + c_hi) / 2.0, max_code=max_code)


def round_half_away(x: np.ndarray) -> np.ndarray:
    """Round to the nearest integer, halves away from zero (ITU-R BT.2100 Round()).

    Keeps the float dtype of *x*.
    """
    return np.copysign(np.floor(np.abs(x) + 0.5), x)


def _float_array(a: object, key: str) -> np.ndarray:
    """*a* as a float array of shape (..., 3), float32 kept, other types as float64."""
    arr = np.asarray(a)
    if arr.dtype.kind not in "fiub":
        raise ConfigError(f"expected a numeric array, got dtype {arr.dtype}", key=key)
    if arr.dtype.kind != "f" or arr.dtype.itemsize < 4:
        arr = arr.astype(np.float64)
    elif arr.dtype not in (np.float32, np.float64):
        arr = arr.astype(np.float64)
    if arr.ndim < 1 or arr.shape[-1] != 3:
        raise ConfigError(f"expected shape (..., 3), got {arr.shape}", key=key)
    if not np.all(np.isfinite(arr)):
        raise ConfigError("array holds NaN or infinite values", key=key)
    return arr


def ypbpr_to_codes(ypbpr: object, *, bits: int = 10, legal: bool = True,
                   quantise: bool = True) -> np.ndarray:
    """Normalised Y′PbPr to Y′CbCr code values.

    Parameters
    ----------
    ypbpr : array_like, shape (..., 3)
        Y′ (0…1) and Pb, Pr (−0.5…+0.5), last axis in that order.
    bits : int, keyword-only
        Code depth, 8…20.
    legal : bool, keyword-only
        Legal or full range (see :func:`code_range`).
    quantise : bool, keyword-only
        True: clip to the permitted codes (:attr:`CodeRange.valid_lo` …
        :attr:`CodeRange.valid_hi`) and round half away from zero.  False: return the exact
        code positions, unclipped.

    Returns
    -------
    ndarray, shape (..., 3)
        Y′, Cb, Cr codes as floats (integral when *quantise*); float32 input stays float32,
        anything else comes back as float64.
    """
    arr = _float_array(ypbpr, "ypbpr")
    cr = code_range(bits, legal=legal)
    # Arithmetic in float64 so that rounding near a half-code is decided on the exact
    # product, then the result is returned in the input's float type.
    a64 = arr.astype(np.float64, copy=False)
    out = np.empty(arr.shape, dtype=np.float64)
    out[..., 0] = cr.y_lo + a64[..., 0] * cr.y_span
    out[..., 1:] = cr.c_mid + a64[..., 1:] * cr.c_span
    if quantise:
        np.clip(out, cr.valid_lo, cr.valid_hi, out=out)
        out = round_half_away(out)
    return out.astype(arr.dtype, copy=False)


def codes_to_ypbpr(codes: object, *, bits: int = 10, legal: bool = True) -> np.ndarray:
    """Y′CbCr code values to normalised Y′ (0…1) and Pb, Pr (−0.5…+0.5).

    Parameters
    ----------
    codes : array_like, shape (..., 3)
        Y′, Cb, Cr codes (integers or floats).
    bits : int, keyword-only
        Code depth, 8…20.
    legal : bool, keyword-only
        Legal or full range (see :func:`code_range`).

    Returns
    -------
    ndarray, shape (..., 3)
        float32 for float32 input, float64 otherwise.  Codes outside the nominal range give
        values outside 0…1 / ±0.5 (no clipping).
    """
    arr = _float_array(codes, "codes")
    cr = code_range(bits, legal=legal)
    a64 = arr.astype(np.float64, copy=False)
    out = np.empty(arr.shape, dtype=np.float64)
    out[..., 0] = (a64[..., 0] - cr.y_lo) / cr.y_span
    out[..., 1:] = (a64[..., 1:] - cr.c_mid) / cr.c_span
    return out.astype(arr.dtype, copy=False)
