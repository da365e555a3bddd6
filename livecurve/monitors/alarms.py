"""Level alarms: samples outside the legal component range or clipped by the output converter.

Legal range
    The nominal analog component levels of the SMPTE ST 274 analog interface:
    Y′ and R′G′B′ 0…700 mV, Pb/Pr ±350 mV (Pb/Pr figure from memory, see
    REFERENCES.md).  In the engine's zero-centred volts every channel's legal
    range is ±350 mV (:func:`livecurve.signal.component.legal_range_v`), the
    default here; a stricter or looser house range can be passed.

Output converter
    The converter after the chain has a fixed input range per channel
    (``converter_limits_v``, centred volts); anything beyond it is clipped.

Counting rule (exact)
    A sample ``v`` of channel ``c`` is *below legal* when ``v < lo_c`` and
    *above legal* when ``v > hi_c`` (a sample exactly on a limit is legal);
    likewise it is *clipped low/high* when it lies strictly beyond the
    converter's limits.  NaN samples are counted as *invalid* only.  A pixel
    is alarmed when any of its three channels is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from numba import prange

from livecurve.monitors.planes import (
    check_out,
    check_planes,
    check_positive_int,
    check_range_v,
    use_threads,
)
from livecurve.signal.component import channel_names, check_space
from livecurve.signal.component import legal_range_v as _nominal_legal_range_v

#: Mask code of a pixel outside the legal range but within the converter's range.
MASK_OUTSIDE_LEGAL = 1
#: Mask code of a pixel clipped by the output converter (takes precedence).
MASK_CLIPPED = 2


@dataclass(frozen=True, eq=False)
class LevelAlarms:
    """Exact counts of alarmed samples in one output frame.

    Attributes
    ----------
    channels : tuple of str
        Channel names of the signal space.
    below_legal, above_legal : ndarray, shape (3,), int64
        Samples strictly below / above the legal range per channel.
    clipped_low, clipped_high : ndarray, shape (3,), int64
        Samples strictly beyond the converter's low / high limit per channel.
    invalid : ndarray, shape (3,), int64
        NaN samples per channel.
    pixels_outside_legal, pixels_clipped : int
        Pixels with at least one channel outside legal / clipped.
    total : int
        Pixels in the frame (H·W).
    """

    channels: tuple[str, str, str]
    below_legal: np.ndarray
    above_legal: np.ndarray
    clipped_low: np.ndarray
    clipped_high: np.ndarray
    invalid: np.ndarray
    pixels_outside_legal: int
    pixels_clipped: int
    total: int

    @property
    def share_outside_legal(self) -> np.ndarray:
        """Share (0…1) of samples outside the legal range, per channel, both directions."""
        return (self.below_legal + self.above_legal) / self.total

    @property
    def share_clipped(self) -> np.ndarray:
        """Share (0…1) of samples clipped by the output converter, per channel."""
        return (self.clipped_low + self.clipped_high) / self.total

    def as_dict(self) -> dict:
        """Plain-Python summary (for reports and JSON)."""
        return {
            "channels": list(self.channels),
            "below_legal": self.below_legal.tolist(),
            "above_legal": self.above_legal.tolist(),
            "clipped_low": self.clipped_low.tolist(),
            "clipped_high": self.clipped_high.tolist(),
            "invalid": self.invalid.tolist(),
            "pixels_outside_legal": self.pixels_outside_legal,
            "pixels_clipped": self.pixels_clipped,
            "total": self.total,
        }


def _limits(space, converter_limits_v, legal_range_v):
    space = check_space(space)
    conv = check_range_v(converter_limits_v, name="converter_limits_v")
    legal = _nominal_legal_range_v(space) if legal_range_v is None else legal_range_v
    legal = check_range_v(legal, name="legal_range_v")
    return space, conv, legal


def level_alarms(planes_out, *, space: str, converter_limits_v,
                 legal_range_v=None) -> LevelAlarms:
    """Count samples outside the legal range and beyond the output converter's range.

    Parameters
    ----------
    planes_out : array_like, shape (3, H, W)
        The chain's output, zero-centred channel volts, before the converter.
    space : {"ypbpr", "rgb"}
    converter_limits_v : array_like, shape (3, 2) or (2,)
        (low, high) input range of the output converter per channel, centred volts.
    legal_range_v : array_like, shape (3, 2) or (2,), optional
        (low, high) legal range per channel, centred volts; default the nominal
        ±350 mV of every channel.

    Returns
    -------
    LevelAlarms
    """
    planes = check_planes(planes_out, name="planes_out")
    space, conv, legal = _limits(space, converter_limits_v, legal_range_v)
    parallel = use_threads(planes.size)
    nt = numba.get_num_threads() if parallel else 1
    scratch = np.empty((nt, 3, 5), dtype=np.int64)
    pix = np.empty((nt, 2), dtype=np.int64)
    (_count_par if parallel else _count_ser)(planes, legal, conv, scratch, pix)
    per = scratch.sum(axis=0)
    tot = pix.sum(axis=0)
    return LevelAlarms(channels=channel_names(space), below_legal=per[:, 0].copy(),
                       above_legal=per[:, 1].copy(), clipped_low=per[:, 2].copy(),
                       clipped_high=per[:, 3].copy(), invalid=per[:, 4].copy(),
                       pixels_outside_legal=int(tot[0]), pixels_clipped=int(tot[1]),
                       total=int(planes.shape[1] * planes.shape[2]))


@numba.njit(cache=True)
def _count_rows(planes, legal, conv, counts, pix, y0, y1):
    """Counts of rows y0…y1−1: counts[c] = [below, above, clip lo, clip hi, NaN];
    pix = [pixels outside legal, pixels clipped].  Limits compare in float64.

    Branch-free per sample (a NaN fails every comparison), so the loops vectorise.
    """
    w = planes.shape[2]
    bad_legal = np.empty(w, dtype=np.uint8)
    bad_clip = np.empty(w, dtype=np.uint8)
    for c in range(3):
        for k in range(5):
            counts[c, k] = 0
    n_legal = 0
    n_clip = 0
    for y in range(y0, y1):
        bad_legal[:] = 0
        bad_clip[:] = 0
        for c in range(3):
            lo, hi = legal[c, 0], legal[c, 1]
            clo, chi = conv[c, 0], conv[c, 1]
            below = 0
            above = 0
            c_lo = 0
            c_hi = 0
            nan = 0
            line = planes[c, y]
            for x in range(w):
                v = np.float64(line[x])
                b = v < lo
                a = v > hi
                cl = v < clo
                ch = v > chi
                below += b
                above += a
                c_lo += cl
                c_hi += ch
                nan += v != v
                bad_legal[x] |= b | a
                bad_clip[x] |= cl | ch
            counts[c, 0] += below
            counts[c, 1] += above
            counts[c, 2] += c_lo
            counts[c, 3] += c_hi
            counts[c, 4] += nan
        for x in range(w):
            n_legal += bad_legal[x]
            n_clip += bad_clip[x]
    pix[0] = n_legal
    pix[1] = n_clip


@numba.njit(cache=True, parallel=True)
def _count_par(planes, legal, conv, scratch, pix):
    """One band of rows per thread into its own slot."""
    h = planes.shape[1]
    nt = scratch.shape[0]
    for t in prange(nt):
        _count_rows(planes, legal, conv, scratch[t], pix[t], t * h // nt, (t + 1) * h // nt)


@numba.njit(cache=True)
def _count_ser(planes, legal, conv, scratch, pix):
    """The whole frame on the calling thread (small frames)."""
    _count_rows(planes, legal, conv, scratch[0], pix[0], 0, planes.shape[1])


def zebra_mask(planes_out, *, space: str, converter_limits_v, legal_range_v=None,
               stripe_px: int = 6, phase: int = 0, striped: bool = True, out=None) -> np.ndarray:
    """Per-pixel alarm codes, optionally cut into diagonal stripes for drawing.

    Parameters
    ----------
    planes_out, space, converter_limits_v, legal_range_v
        As in :func:`level_alarms`.
    stripe_px : int
        Width of each stripe and each gap, pixels (measured along x + y).
    phase : int
        Offset of the stripes along x + y, pixels; step it each frame to make
        the stripes crawl.
    striped : bool
        False returns the full alarm mask (every alarmed pixel coded).
    out : ndarray of uint8, shape (H, W), optional
        Buffer to reuse; every element is overwritten.

    Returns
    -------
    ndarray of uint8, shape (H, W)
        0 where nothing is alarmed (or in a stripe gap), :data:`MASK_OUTSIDE_LEGAL`
        where some channel is outside the legal range, :data:`MASK_CLIPPED` where
        some channel is clipped by the converter.  Stripes keep pixels with
        ``((x + y + phase) // stripe_px)`` even.
    """
    planes = check_planes(planes_out, name="planes_out")
    space, conv, legal = _limits(space, converter_limits_v, legal_range_v)
    stripe = check_positive_int(stripe_px, name="stripe_px", maximum=4096)
    ph = int(phase) % (2 * stripe)
    out = check_out(out, planes.shape[1:], np.uint8)
    kernel = _zebra_par if use_threads(planes.size) else _zebra_ser
    kernel(planes, legal, conv, stripe if striped else 0, ph, out)
    return out


@numba.njit(cache=True)
def _zebra_row(planes, legal, conv, stripe, phase, out, y):
    """out[y, x] = alarm code (0/1/2), kept only on even stripes when stripe > 0.

    Per channel: 2·clipped | outside-legal gives 0…3; the pixel's code is the
    largest over the channels, 3 folded to 2 (clipping takes precedence).
    """
    w = planes.shape[2]
    row = out[y]
    row[:] = 0
    for c in range(3):
        lo, hi = legal[c, 0], legal[c, 1]
        clo, chi = conv[c, 0], conv[c, 1]
        line = planes[c, y]
        for x in range(w):
            v = np.float64(line[x])
            m = np.uint8(2 * ((v < clo) | (v > chi)) + ((v < lo) | (v > hi)))
            row[x] = max(row[x], m)
    period = 2 * stripe
    s = (y + phase) % period if stripe > 0 else 0
    for x in range(w):
        keep = stripe == 0 or s < stripe
        row[x] = min(row[x], np.uint8(2)) if keep else np.uint8(0)
        s += 1
        if s == period:
            s = 0


@numba.njit(cache=True, parallel=True)
def _zebra_par(planes, legal, conv, stripe, phase, out):
    for y in prange(planes.shape[1]):
        _zebra_row(planes, legal, conv, stripe, phase, out, y)


@numba.njit(cache=True)
def _zebra_ser(planes, legal, conv, stripe, phase, out):
    for y in range(planes.shape[1]):
        _zebra_row(planes, legal, conv, stripe, phase, out, y)
