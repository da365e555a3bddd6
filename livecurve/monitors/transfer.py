"""Transfer view numbers: the chain's present curve and where the picture sits on it.

A static run of stages maps input volts to output volts per channel (a
transfer curve, built by the DC solver).  This monitor pairs that curve with a
histogram of the current frame's *input* samples along the curve's input
axis, so the user sees which part of the curve (toe, linear part, knee,
clipping) the picture actually uses.  Volts are the engine's zero-centred
channel volts (see :mod:`livecurve.signal.component`) on both axes.

Bin mapping (exact)
    With ``lo = curve_in_v[0]``, ``hi = curve_in_v[-1]``:
    ``f = (v − lo) · (bins / (hi − lo))`` in float64, ``bin = floor(f)`` for
    ``0 ≤ f < bins``; ``f == bins`` (a sample at ``hi``) goes to the last bin;
    ``f < 0`` is counted in ``below`` and ``f > bins`` in ``above``; NaN
    samples are not counted anywhere.
    ``edges_v`` are ``lo + k·(hi − lo)/bins`` for k = 0…bins.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from numba import prange

from livecurve.errors import ConfigError
from livecurve.monitors.planes import check_planes, check_positive_int, use_threads


@dataclass(frozen=True, eq=False)
class TransferView:
    """A channel's present transfer curve and the frame's input histogram along it.

    Attributes
    ----------
    curve_in_v : ndarray, shape (N,), float64
        Input axis of the curve, volts, strictly increasing.
    curve_out_v : ndarray, shape (3, N), float64
        Output volts per channel at each input point.
    edges_v : ndarray, shape (bins + 1,), float64
        Bin edges along the input axis, volts.
    counts : ndarray, shape (3, bins), uint32
        Input samples per bin and channel.
    below, above : ndarray, shape (3,), int64
        Samples below the curve's first / above its last input point.
    extent_v : ndarray, shape (3, 2), float64
        Lowest and highest finite input sample per channel (NaN if none).
    total : int
        Samples per channel in the frame (H·W), NaN samples included.
    """

    curve_in_v: np.ndarray
    curve_out_v: np.ndarray
    edges_v: np.ndarray
    counts: np.ndarray
    below: np.ndarray
    above: np.ndarray
    extent_v: np.ndarray
    total: int

    @property
    def bins(self) -> int:
        """Number of histogram bins."""
        return self.counts.shape[1]

    def occupied_share(self) -> np.ndarray:
        """Share of the curve's input range (0…1) holding at least one sample, per channel."""
        return (self.counts > 0).sum(axis=1) / self.bins

    def used_span_v(self) -> np.ndarray:
        """Input span (volts) from the lowest to the highest occupied bin edge, shape (3, 2).

        NaN for a channel with no sample inside the curve's range.
        """
        res = np.full((3, 2), np.nan)
        for c in range(3):
            nz = np.flatnonzero(self.counts[c])
            if nz.size:
                res[c] = self.edges_v[nz[0]], self.edges_v[nz[-1] + 1]
        return res


def transfer_view(curve_in_v, curve_out_v, planes_in, *, bins: int = 128) -> TransferView:
    """Pair a transfer curve with the histogram of this frame's input along it.

    Parameters
    ----------
    curve_in_v : array_like, shape (N,)
        Input volts of the curve, N >= 2, finite and strictly increasing.
    curve_out_v : array_like, shape (3, N) or (N,)
        Output volts per channel (a single row is used for all three).
    planes_in : array_like, shape (3, H, W)
        Zero-centred input volts of the frame, same axis as *curve_in_v*.
    bins : int
        Histogram bins over ``curve_in_v[0] … curve_in_v[-1]``, 1…1 000 000.

    Returns
    -------
    TransferView
    """
    cin = np.asarray(curve_in_v, dtype=np.float64)
    if cin.ndim != 1 or cin.size < 2:
        raise ConfigError("curve input axis must be 1-D with at least 2 points",
                          key="curve_in_v", value=np.shape(curve_in_v))
    if not np.all(np.isfinite(cin)) or not np.all(np.diff(cin) > 0):
        raise ConfigError("curve input axis must be finite and strictly increasing",
                          key="curve_in_v", value=f"{cin[:4].tolist()}…")
    cout = np.asarray(curve_out_v, dtype=np.float64)
    if cout.shape == cin.shape:
        cout = np.tile(cout, (3, 1))
    if cout.shape != (3, cin.size):
        raise ConfigError(f"curve output must have shape (3, {cin.size}) or ({cin.size},)",
                          key="curve_out_v", value=np.shape(curve_out_v))
    planes = check_planes(planes_in, name="planes_in")
    bins = check_positive_int(bins, name="bins", maximum=1_000_000)
    lo, hi = float(cin[0]), float(cin[-1])
    parallel = use_threads(planes.size)
    nt = numba.get_num_threads() if parallel else 1
    scratch = np.empty((nt, 3, bins + 2), dtype=np.int64)
    ext = np.empty((nt, 3, 2), dtype=np.float64)
    (_transfer_par if parallel else _transfer_ser)(planes, lo, bins / (hi - lo), scratch, ext)
    total = scratch.sum(axis=0)
    with np.errstate(invalid="ignore"):
        mn, mx = ext[:, :, 0].min(axis=0), ext[:, :, 1].max(axis=0)
    empty = mn > mx                                   # no finite sample in the channel
    extent = np.stack([np.where(empty, np.nan, mn), np.where(empty, np.nan, mx)], axis=1)
    edges = lo + np.arange(bins + 1) * ((hi - lo) / bins)
    edges[-1] = hi
    return TransferView(curve_in_v=cin.copy(), curve_out_v=np.ascontiguousarray(cout),
                        edges_v=edges, counts=total[:, 1:bins + 1].astype(np.uint32),
                        below=total[:, 0].copy(), above=total[:, bins + 1].copy(),
                        extent_v=extent, total=int(planes.shape[1] * planes.shape[2]))


@numba.njit(cache=True)
def _transfer_rows(planes, lo, bins_per_v, hist, ext, y0, y1):
    """Histogram rows y0…y1−1 into hist (3, bins+2): slot 0 below, 1…bins, bins+1 above.

    ext[c] receives the lowest and highest finite sample (inf, −inf when none).
    """
    w = planes.shape[2]
    nb = hist.shape[1] - 2
    fnb = np.float64(nb)
    for c in range(3):
        for k in range(nb + 2):
            hist[c, k] = 0
        mn = np.inf
        mx = -np.inf
        hc = hist[c]
        for y in range(y0, y1):
            for x in range(w):
                v = np.float64(planes[c, y, x])
                if v != v:
                    continue
                mn = min(mn, v)
                mx = max(mx, v)
                f = (v - lo) * bins_per_v
                if f < 0.0:
                    hc[0] += 1
                elif f < fnb:
                    hc[int(f) + 1] += 1
                elif f == fnb:  # exactly at the last input point
                    hc[nb] += 1
                else:
                    hc[nb + 1] += 1
        ext[c, 0] = mn
        ext[c, 1] = mx


@numba.njit(cache=True, parallel=True)
def _transfer_par(planes, lo, bins_per_v, scratch, ext):
    """One band of rows per thread, each into its own slot of scratch/ext."""
    h = planes.shape[1]
    nt = scratch.shape[0]
    for t in prange(nt):
        _transfer_rows(planes, lo, bins_per_v, scratch[t], ext[t], t * h // nt,
                       (t + 1) * h // nt)


@numba.njit(cache=True)
def _transfer_ser(planes, lo, bins_per_v, scratch, ext):
    """The whole frame on the calling thread (small frames)."""
    _transfer_rows(planes, lo, bins_per_v, scratch[0], ext[0], 0, planes.shape[1])
