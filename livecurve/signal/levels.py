"""Decoded R′G′B′ code values ↔ zero-centred channel volts, and the output converter.

Sources
-------
* R′G′B′ → Y′PbPr matrices of ITU-R BT.601, BT.709-6 and BT.2020 (non-constant luminance):
  :mod:`livecurve.signal.component`.
* Analog levels: Y′ and R′G′B′ 0…700 mV above blanking, Pb/Pr ±350 mV (SMPTE ST 274 analog
  interface); the engine works on them shifted to ±350 mV (``centre_offsets_v``).
* Y′CbCr code ranges and the permitted code extent (8-bit legal 1…254, 10-bit 4…1019):
  :mod:`livecurve.signal.codes` (ITU-R BT.601 / BT.709-6 / BT.2020).
* Rounding: half away from zero, ITU-R BT.2100 Round(); every rounded value here is
  non-negative, so it is ``floor(x + 0.5)``.  Values that are mathematically exact halves
  (mid-grey 0 V in a full-range converter sits on code 511.5 at 10 bits; some legal R′G′B′
  codes map to k + ½ output words) come out of float64 arithmetic a few ulp either side, so
  both roundings add :data:`TIE_EPS` (1e-8 code) first: exact halves go up, deterministically.
  That moves the rounding threshold by far less than the resolution of float32 volts
  (~4e-5 code at 10 bits).

Input side
----------
:func:`codes_to_volts` reads a decoded picture, interleaved R′G′B′ codes (H, W, 3) in full range
(uint8 0…255, uint16 0…65535, or fewer bits in uint16 with ``bits=``), and writes planar
float32 volts (3, H, W): for ``space="ypbpr"`` Y′ − 0.35 V, Pb, Pr through the standard's matrix;
for ``space="rgb"`` each R′G′B′ channel − 0.35 V.

Output converter
----------------
:func:`volts_to_codes` models the converter at the end of the chain.  Centred volts become
Y′CbCr codes at the converter's depth and range (for ``space="rgb"``: R′G′B′ codes on the Y′
levels), are clipped to the codes the converter may emit (legal: the extent the standard
permits, full: 0…2^n−1), rounded, then turned back into R′G′B′ 0…1 with the inverse matrix,
clipped to 0…1 (a colour outside the R′G′B′ cube cannot be shown) and rounded to the output
word (uint8 0…255, uint16 0…65535 or ``out_bits``).

Exact round trip
----------------
Through an identity chain, codes → volts → codes returns the input exactly whenever the
converter is *at least as fine as the input*: the converter's half-code error, carried back
through the inverse matrix to R′G′B′, stays below half an input code.  For Y′CbCr that needs
about two more bits than the input (8-bit input: 10-bit legal converter, the default; 16-bit
input: 18 bits); for R′G′B′ a converter span of at least the input's.  :func:`converter_is_exact`
evaluates this bound.  A Y′CbCr converter at the input's own depth cannot be exact: legal
8-bit Y′CbCr has 220·225·225 ≈ 11.1 M codes for 16.8 M R′G′B′ colours.
"""

from __future__ import annotations

import numba
import numpy as np

from livecurve.errors import ConfigError, MediaError, SolverError
from livecurve.signal.codes import CodeRange, check_bits, code_range
from livecurve.signal.component import (
    Y_SPAN_V,
    centre_offsets_v,
    check_space,
    check_standard,
    rgb_to_ypbpr_matrix,
    ypbpr_to_rgb_matrix,
)

#: Added before rounding so that exact half codes, blurred by float64 noise (~1e-10 code),
#: always round up (see the module docstring).
TIE_EPS = 1e-8

#: Relative error allowed for float32 volts when deciding :func:`converter_is_exact`
#: (float32 has a 2^-24 relative rounding step; 1e-7 leaves a margin for the arithmetic).
_F32_REL = 1e-7


# --------------------------------------------------------------------------- input side


def _word_bits(dtype: np.dtype, bits: object, *, dtype_key: str, bits_key: str) -> int:
    """Bits per code for a uint8/uint16 word, checking an explicit *bits* against it."""
    if dtype == np.uint8:
        width = 8
    elif dtype == np.uint16:
        width = 16
    else:
        raise ConfigError(f"expected uint8 or uint16 codes, got dtype {dtype}", key=dtype_key)
    if bits is None:
        return width
    b = check_bits(bits, key=bits_key)
    if b > width:
        raise ConfigError(f"{b}-bit codes do not fit a {dtype} word (at most {width} bits)",
                          key=bits_key, value=bits)
    return b


def _check_out(out: np.ndarray, shape: tuple, dtype: np.dtype) -> np.ndarray:
    """Validate a caller-supplied output array (shape, dtype, C order, writeable)."""
    if not isinstance(out, np.ndarray) or out.shape != shape or out.dtype != dtype \
            or not out.flags.c_contiguous or not out.flags.writeable:
        got = (f"{out.dtype} {out.shape}" if isinstance(out, np.ndarray)
               else type(out).__name__)
        raise ConfigError(f"out must be a writeable C-contiguous {np.dtype(dtype)} array of "
                          f"shape {shape}, got {got}", key="out")
    return out


def input_matrix_v(space: str, standard: str, max_code: int) -> tuple[np.ndarray, np.ndarray]:
    """Affine map from R′G′B′ codes to centred channel volts.

    Returns
    -------
    m : ndarray, shape (3, 3), float64
        Volts per code: channel volts = m @ (R′, G′, B′) codes − off.
    off : ndarray, shape (3,), float64
        Centring offsets in volts (:func:`~livecurve.signal.component.centre_offsets_v`).
    """
    sp = check_space(space)
    std = check_standard(standard)
    base = rgb_to_ypbpr_matrix(std) if sp == "ypbpr" else np.eye(3)
    return base * (Y_SPAN_V / max_code), np.array(centre_offsets_v(sp))


@numba.njit(cache=True, parallel=True)
def _codes_to_volts(rgb, m, off, max_code, out):
    """out[c, y, x] = Σ_k m[c, k]·rgb[y, x, k] − off[c]; returns the count of codes > max_code."""
    h, w = rgb.shape[0], rgb.shape[1]
    m00, m01, m02 = m[0, 0], m[0, 1], m[0, 2]
    m10, m11, m12 = m[1, 0], m[1, 1], m[1, 2]
    m20, m21, m22 = m[2, 0], m[2, 1], m[2, 2]
    o0, o1, o2 = off[0], off[1], off[2]
    nbad = 0
    for y in numba.prange(h):
        for x in range(w):
            r = np.float64(rgb[y, x, 0])
            g = np.float64(rgb[y, x, 1])
            b = np.float64(rgb[y, x, 2])
            if r > max_code or g > max_code or b > max_code:
                nbad += 1
            out[0, y, x] = m00 * r + m01 * g + m02 * b - o0
            out[1, y, x] = m10 * r + m11 * g + m12 * b - o1
            out[2, y, x] = m20 * r + m21 * g + m22 * b - o2
    return nbad


def codes_to_volts(rgb: np.ndarray, *, space: str, standard: str, bits: int | None = None,
                   out: np.ndarray | None = None) -> np.ndarray:
    """Decoded full-range R′G′B′ codes to zero-centred channel volts.

    Parameters
    ----------
    rgb : ndarray, shape (H, W, 3), uint8 or uint16
        Interleaved R′G′B′ code values, full range (as ffmpeg's rgb24 / rgb48le give them).
    space : {"ypbpr", "rgb"}, keyword-only
        Channels to produce: Y′, Pb, Pr or R′, G′, B′.
    standard : {"bt601", "bt709", "bt2020"}, keyword-only
        Matrix for ``space="ypbpr"`` (checked but unused for ``"rgb"``).
    bits : int, optional, keyword-only
        Significant bits per code: default 8 for uint8, 16 for uint16; e.g. 10 for 10-bit
        codes in uint16 words (max code 1023).
    out : ndarray, shape (3, H, W), float32, optional, keyword-only
        Written in place and returned; nothing is allocated when given.

    Returns
    -------
    ndarray, shape (3, H, W), float32
        Volts: Y′ and R′G′B′ −0.35…+0.35 V, Pb/Pr −0.35…+0.35 V.

    Raises
    ------
    ConfigError
        Bad space, standard, bits, shape, dtype or *out*.
    MediaError
        A code exceeds 2^bits − 1.
    """
    if not isinstance(rgb, np.ndarray) or rgb.ndim != 3 or rgb.shape[2] != 3:
        got = rgb.shape if isinstance(rgb, np.ndarray) else type(rgb).__name__
        raise ConfigError(f"expected interleaved R′G′B′ codes of shape (H, W, 3), got {got}",
                          key="rgb")
    b = _word_bits(rgb.dtype, bits, dtype_key="rgb", bits_key="bits")
    h, w = rgb.shape[:2]
    if h == 0 or w == 0:
        raise ConfigError(f"empty frame {rgb.shape}", key="rgb")
    max_code = 2 ** b - 1
    m, off = input_matrix_v(space, standard, max_code)
    src = np.ascontiguousarray(rgb)
    if out is None:
        out = np.empty((3, h, w), dtype=np.float32)
    else:
        _check_out(out, (3, h, w), np.dtype(np.float32))
    nbad = _codes_to_volts(src, m, off, float(max_code), out)
    if nbad:
        raise MediaError(f"{nbad} pixels hold codes above {max_code}, the largest {b}-bit "
                         f"code (largest found: {int(src.max())}); pass the right bits=")
    return out


# --------------------------------------------------------------------------- output converter


def _converter_ranges(space: str, cr: CodeRange):
    """Per-channel converter gain/bias (volts → codes), inverse and clip extent, float64 (3,)."""
    off = np.array(centre_offsets_v(space))
    if space == "ypbpr":
        zero = np.array([cr.y_lo, cr.c_mid, cr.c_mid])
        span = np.array([cr.y_span, cr.c_span, cr.c_span])
        # Y′: code = y_lo + (v + 0.35)/0.7·span ; Pb/Pr: code = c_mid + v/0.7·span
    else:
        zero = np.full(3, cr.y_lo)
        span = np.full(3, cr.y_span)
    gain = span / Y_SPAN_V
    bias = zero + off * gain
    lo = np.full(3, float(cr.valid_lo))
    hi = np.full(3, float(cr.valid_hi))
    return gain, bias, lo, hi, 1.0 / span, -zero / span


@numba.njit(cache=True, parallel=True)
def _volts_to_codes(planes, gain, bias, lo, hi, igain, ibias, minv, out_max, tie_eps, out):
    """Converter codes → normalised channels → R′G′B′ words.  Returns the number of NaN pixels.

    Per channel: code = clip(gain·v + bias, lo, hi), rounded half up (codes are ≥ 0, so
    Floor(code + 0.5 + tie_eps) is BT.2100 Round with exact halves pushed up);
    n = igain·code + ibias is Y′ 0…1 and Pb, Pr ±0.5 (or R′G′B′ 0…1).  Then R′G′B′ = minv @ n,
    clipped to 0…1, word = ⌊x·out_max + 0.5 + tie_eps⌋.
    A pixel holding NaN is counted; its codes are undefined (the caller raises).
    """
    h, w = planes.shape[1], planes.shape[2]
    g0, g1, g2 = gain[0], gain[1], gain[2]
    b0, b1, b2 = bias[0], bias[1], bias[2]
    l0, l1, l2 = lo[0], lo[1], lo[2]
    h0, h1, h2 = hi[0], hi[1], hi[2]
    i0, i1, i2 = igain[0], igain[1], igain[2]
    j0, j1, j2 = ibias[0], ibias[1], ibias[2]
    m00, m01, m02 = minv[0, 0], minv[0, 1], minv[0, 2]
    m10, m11, m12 = minv[1, 0], minv[1, 1], minv[1, 2]
    m20, m21, m22 = minv[2, 0], minv[2, 1], minv[2, 2]
    half = 0.5 + tie_eps
    nnan = 0
    for y in numba.prange(h):
        p0, p1, p2 = planes[0, y], planes[1, y], planes[2, y]
        row = out[y]
        nrow = 0
        for x in range(w):
            v0 = np.float64(p0[x])
            v1 = np.float64(p1[x])
            v2 = np.float64(p2[x])
            # NaN is counted (the caller raises) and otherwise left to fall where it may:
            # no select in the arithmetic keeps the loop lean
            nrow += np.int64((v0 != v0) | (v1 != v1) | (v2 != v2))
            c0 = min(max(g0 * v0 + b0, l0), h0)
            c1 = min(max(g1 * v1 + b1, l1), h1)
            c2 = min(max(g2 * v2 + b2, l2), h2)
            n0 = np.floor(c0 + half) * i0 + j0
            n1 = np.floor(c1 + half) * i1 + j1
            n2 = np.floor(c2 + half) * i2 + j2
            r = min(max(m00 * n0 + m01 * n1 + m02 * n2, 0.0), 1.0)
            g = min(max(m10 * n0 + m11 * n1 + m12 * n2, 0.0), 1.0)
            b = min(max(m20 * n0 + m21 * n1 + m22 * n2, 0.0), 1.0)
            row[x, 0] = np.int32(r * out_max + half)
            row[x, 1] = np.int32(g * out_max + half)
            row[x, 2] = np.int32(b * out_max + half)
        nnan += nrow
    return nnan


def volts_to_codes(planes: np.ndarray, *, space: str, standard: str, converter_bits: int = 10,
                   converter_legal: bool = True, out_dtype: type = np.uint8,
                   out_bits: int | None = None, out: np.ndarray | None = None) -> np.ndarray:
    """Zero-centred channel volts through the output converter to R′G′B′ code values.

    Parameters
    ----------
    planes : ndarray, shape (3, H, W), float
        Centred channel volts (Y′, Pb, Pr or R′, G′, B′); converted to float32 C order first
        if needed.  ±inf clip like any out-of-range value; NaN raises.
    space : {"ypbpr", "rgb"}, keyword-only
        What the planes carry.  "ypbpr": the converter quantises Y′CbCr; "rgb": it quantises
        each R′G′B′ channel on the Y′ code levels.
    standard : {"bt601", "bt709", "bt2020"}, keyword-only
        Matrix back to R′G′B′ for ``space="ypbpr"`` (checked but unused for ``"rgb"``).
    converter_bits : int, keyword-only
        Converter depth, 8…20 (default 10).
    converter_legal : bool, keyword-only
        Legal range (clips to the permitted extent, e.g. 4…1019 at 10 bits) or full range
        (0…2^n−1).  Default True.
    out_dtype : {numpy.uint8, numpy.uint16}, keyword-only
        Output word.
    out_bits : int, optional, keyword-only
        Significant output bits (default: the whole word, 8 or 16), e.g. 10 in uint16.
    out : ndarray, shape (H, W, 3), optional, keyword-only
        Written in place and returned (dtype *out_dtype*, C order); nothing is allocated
        when it is given and *planes* is already float32 C-contiguous.

    Returns
    -------
    ndarray, shape (H, W, 3), *out_dtype*
        Full-range interleaved R′G′B′ codes, 0…2^out_bits − 1.

    Raises
    ------
    ConfigError
        Bad space, standard, bit depths, shapes, dtypes or *out*.
    SolverError
        *planes* holds NaN: the chain produced values no converter can encode.
    """
    sp = check_space(space)
    std = check_standard(standard)
    cb = check_bits(converter_bits, key="converter_bits")
    if not isinstance(converter_legal, (bool, np.bool_)):
        raise ConfigError("converter_legal must be true or false", key="converter_legal",
                          value=converter_legal)
    try:
        odt = np.dtype(out_dtype)
    except TypeError as exc:
        raise ConfigError("out_dtype must be uint8 or uint16", key="out_dtype",
                          value=out_dtype) from exc
    ob = _word_bits(odt, out_bits, dtype_key="out_dtype", bits_key="out_bits")
    if not isinstance(planes, np.ndarray) or planes.ndim != 3 or planes.shape[0] != 3 \
            or planes.dtype.kind != "f":
        got = (f"{planes.dtype} {planes.shape}" if isinstance(planes, np.ndarray)
               else type(planes).__name__)
        raise ConfigError(f"expected float planes of shape (3, H, W), got {got}", key="planes")
    h, w = planes.shape[1:]
    if h == 0 or w == 0:
        raise ConfigError(f"empty frame {planes.shape}", key="planes")
    src = np.ascontiguousarray(planes, dtype=np.float32)
    if out is None:
        out = np.empty((h, w, 3), dtype=odt)
    else:
        _check_out(out, (h, w, 3), odt)
    cr = code_range(cb, legal=bool(converter_legal))
    gain, bias, lo, hi, igain, ibias = _converter_ranges(sp, cr)
    minv = ypbpr_to_rgb_matrix(std) if sp == "ypbpr" else np.eye(3)
    nnan = _volts_to_codes(src, gain, bias, lo, hi, igain, ibias, minv, float(2 ** ob - 1),
                           TIE_EPS, out)
    if nnan:
        c, y, x = (int(i[0]) for i in np.nonzero(np.isnan(src)))
        raise SolverError(f"planes hold NaN in {nnan} pixels (first at channel {c}, row {y}, "
                          f"column {x}): the chain produced values no converter can encode")
    return out


def converter_limits_v(space: str, *, converter_bits: int = 10,
                       converter_legal: bool = True) -> np.ndarray:
    """Centred volts at which the output converter reaches its extreme codes.

    Any voltage beyond a limit gives the same code as the limit: monitors use these for clip
    alarms.  For ``space="ypbpr"`` they bound Y′, Pb, Pr independently; a Y′PbPr triple inside
    them can still fall outside the R′G′B′ cube and be clipped at the output word.

    Parameters
    ----------
    space : {"ypbpr", "rgb"}
    converter_bits : int, keyword-only
    converter_legal : bool, keyword-only

    Returns
    -------
    ndarray, shape (3, 2), float64
        [low, high] volts per channel.  10-bit legal Y′: (4 − 64)/876·0.7 − 0.35 …
        (1019 − 64)/876·0.7 − 0.35 V.
    """
    sp = check_space(space)
    cr = code_range(check_bits(converter_bits, key="converter_bits"), legal=converter_legal)
    gain, bias, lo, hi, _, _ = _converter_ranges(sp, cr)
    return np.stack([(lo - bias) / gain, (hi - bias) / gain], axis=1)


def converter_is_exact(input_bits: int, *, space: str, standard: str, converter_bits: int = 10,
                       converter_legal: bool = True) -> bool:
    """Whether codes → volts → codes is guaranteed exact through an identity chain.

    The converter's rounding error is at most half a code per channel (plus float32 volts
    error, relative 1e-7).  Carried back through the inverse matrix it moves R′G′B′ channel
    *i* by at most e_i = Σ_j |M⁻¹_ij|·(0.5 + δ_j)/span_j (normalised units).  The input code is
    recovered when (2^input_bits − 1)·max_i e_i < 0.5.  A full-range R′G′B′ converter whose
    depth is a multiple of the input's (8 → 8, 8 → 16) is exact as well: every input code
    lands on a converter code.  The bound is sufficient, not necessary.

    Parameters
    ----------
    input_bits : int
        Bits of the decoded codes and of the output word (8…16).
    space, standard : str, keyword-only
    converter_bits : int, keyword-only
    converter_legal : bool, keyword-only

    Returns
    -------
    bool
    """
    ib = check_bits(input_bits, key="input_bits")
    if ib > 16:
        raise ConfigError("decoded codes have at most 16 bits", key="input_bits",
                          value=input_bits)
    sp = check_space(space)
    std = check_standard(standard)
    cr = code_range(check_bits(converter_bits, key="converter_bits"), legal=converter_legal)
    if sp == "rgb" and not cr.legal and cr.bits % ib == 0:
        return True
    _, _, _, _, igain, _ = _converter_ranges(sp, cr)
    minv = ypbpr_to_rgb_matrix(std) if sp == "ypbpr" else np.eye(3)
    step = igain * (0.5 + _F32_REL / igain)  # half a code plus float32 error, normalised
    err = np.abs(minv) @ step
    return bool((2 ** ib - 1) * err.max() < 0.5)
