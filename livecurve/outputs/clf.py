"""The chain's static behaviour as a CLF file (Academy/ASC Common LUT Format, v3).

Standard
--------
Academy/ASC Common LUT Format, version 3 (S-2014-006): an XML ``ProcessList``
(``compCLFversion="3"``) of process nodes — here ``Matrix``, ``LUT1D``, ``LUT3D`` and
``Range`` — each with ``inBitDepth``/``outBitDepth``; we write every node at ``32f``
(floats, values 0…1 nominal).  ``LUT1D`` arrays are ``dim="N 3"`` (one column per
channel), ``LUT3D`` arrays ``dim="n n n 3"`` with the blue index changing fastest.  A
``Range`` node with only min/max values of 0 and 1 clamps to 0…1.

What the file does
------------------
Input and output are full-range R′G′B′ code values normalised to 0…1, the way stills are
read and written (a 16-bit PNG code k is k/65535).  The entries are computed along the
path ``livecurve render STILL.png OUT.png`` takes, with the DC solver as the source of truth:

1. R′G′B′ 0…1 → zero-centred channel volts (as :func:`livecurve.signal.levels.codes_to_volts`:
   R′G′B′ chains 0.7·x − 0.35 V per channel; Y′PbPr chains through the standard's matrix);
2. each channel through the chain (:meth:`livecurve.circuit.chain.ChainModel.transfer`, at the
   chosen junction temperature and knob values);
3. the output converter's **clipping** (:func:`livecurve.signal.levels.converter_limits_v`),
   then back to R′G′B′ with the inverse matrix and a clamp to 0…1 — as
   :func:`livecurve.signal.levels.volts_to_codes` does, **without its quantisation**.

Quantisation is left out on purpose: a LUT holds a continuous curve, and a staircase of
converter codes inside a LUT would be smeared by its interpolation anyway.  The
difference from a render is therefore at most half a converter code carried through the
inverse matrix (R′G′B′ 10-bit legal: 0.5/876 = 5.7e-4; the tests measure it), plus the
engine's table bound (0.05 mV ≈ 7e-5), plus the line-rate dynamics a static LUT cannot
hold (edges of a render ring or slew; flat areas agree).

Forms
-----
* ``"lut1d"`` (R′G′B′ chains): one ``LUT1D`` with three columns, then a ``Range`` clamp.
  The clamp to 0…1 sits outside the LUT, so the hard corner where the output clips is
  exact instead of being cut by interpolation.
* ``"matrix-lut1d"`` (Y′PbPr chains): ``Matrix`` (R′G′B′ → Y′, Pb + ½, Pr + ½ of the
  standard) → ``LUT1D`` (each channel's chain and converter clip) → ``Matrix`` (back to
  R′G′B′) → ``Range`` clamp.  livecurve processes the three channels independently, so this
  separable form is exact up to 1-D interpolation.
* ``"lut3d"`` (either space): one ``LUT3D`` of size n³ (33 or 65 are the common sizes)
  with the matrices folded in, for tools that take only 3-D LUTs.  Its tetrahedral
  interpolation cuts the curved clipping surfaces of the R′G′B′ cube and the knees of the
  chain, so it is measured (at cell centres and random points) and reported, not assumed.

``"auto"`` picks ``"lut1d"`` for R′G′B′ and ``"matrix-lut1d"`` for Y′PbPr.  1-D sizes start
at 1025 entries and double (reusing every solved point) until the worst interpolation
error at the half-way points, carried to the R′G′B′ output, is at most ``target`` (1e-5).
For a chain whose standard is ``auto`` the matrices are BT.709's (the common guess for HD).
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec
from livecurve.errors import ConfigError
from livecurve.signal.component import (
    Y_SPAN_V,
    channel_names,
    check_standard,
    rgb_to_ypbpr_matrix,
    ypbpr_to_rgb_matrix,
)
from livecurve.signal.levels import converter_limits_v

FORMS = ("auto", "lut1d", "matrix-lut1d", "lut3d")
#: Worst 1-D interpolation error allowed, in R′G′B′ output units (0…1).
LUT1D_TARGET = 1e-5
LUT1D_START = 1025
LUT1D_MAX = 262145
LUT3D_SIZES = (2, 129)  # smallest and largest cube edge accepted (OpenColorIO reads ≤ 129)
#: Half the nominal span of every channel in centred volts (Y′/R′G′B′ 0…0.7 V → ±0.35 V;
#: Pb/Pr ±0.35 V), so u = (v + 0.35)/0.7 maps every channel to 0…1.
_HALF_V = Y_SPAN_V / 2


@dataclass
class ClfReport:
    """What :func:`write_clf` wrote.

    Attributes
    ----------
    path : str
    form : str
        ``"lut1d"``, ``"matrix-lut1d"`` or ``"lut3d"``.
    size : int
        Entries per channel (1-D) or cube edge (3-D).
    interp_err : float
        Worst measured interpolation error against the solver, R′G′B′ units (0…1).
    seconds : float
        Time to compute and write.
    standard : str
        Matrices used (Y′PbPr chains).
    t_kelvin : float
    live : dict
    """

    path: str
    form: str
    size: int
    interp_err: float
    seconds: float
    standard: str
    t_kelvin: float
    live: dict = field(default_factory=dict)


# ---------------------------------------------------------------------------- the static path
def check_live(spec: ChainSpec, live: dict | None) -> dict:
    """Knob values merged over the starting values; unknown names or values out of range are
    refused with the chain's path and the knob's key."""
    out = {k: v.value for k, v in spec.live.items()}
    for name, v in (live or {}).items():
        if name not in spec.live:
            raise ConfigError(f"no live parameter '{name}'; live: "
                              f"{', '.join(spec.live) or 'none'}", path=spec.path,
                              key=f"live.{name}", value=v)
        ls = spec.live[name]
        fv = float(v)
        if not (math.isfinite(fv) and ls.lo <= fv <= ls.hi):
            raise ConfigError(f"outside the knob's range {ls.lo:g} … {ls.hi:g}",
                              path=spec.path, key=f"live.{name}", value=v)
        out[name] = fv
    return out


def check_temperature(spec: ChainSpec, t_kelvin: float | None) -> float:
    """The junction temperature to use (default the chain's ambient), checked."""
    t = spec.ambient_k if t_kelvin is None else float(t_kelvin)
    if not (math.isfinite(t) and t > 0):
        raise ConfigError("temperature must be finite and above 0 K", path=spec.path,
                          key="t_kelvin", value=t_kelvin)
    return t


def _standard(spec: ChainSpec, standard: str | None) -> str:
    return check_standard(standard) if standard else spec.standard_or_default


def channel_transfer(model, ch: int, v: np.ndarray, *, t_kelvin: float,
                     live: dict | None) -> np.ndarray:
    """One channel's DC transfer at each of *v* (volts), solving each distinct value once."""
    v = np.asarray(v, dtype=np.float64)
    if not model.stages_for(ch):
        return v.copy()
    vals, inv = np.unique(v, return_inverse=True)
    y = model.transfer(ch, vals, t_kelvin=t_kelvin, live=live)
    return y[inv].reshape(v.shape)


def volts_to_rgb01(out_v: np.ndarray, spec: ChainSpec, *, standard: str) -> np.ndarray:
    """Chain output volts (3, N) → R′G′B′ 0…1 (N, 3): converter clip, inverse matrix, clamp.

    The output converter's clipping is applied (its code extent, in volts), its
    quantisation is not (see the module docstring).
    """
    lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                             converter_legal=spec.converter_legal)
    v = np.clip(out_v, lim[:, :1], lim[:, 1:])
    n = (v + _HALF_V) / Y_SPAN_V  # Y′ or R′G′B′ 0…1; Pb/Pr + 0.5
    if spec.space == "ypbpr":
        n[1:] -= 0.5
        n = ypbpr_to_rgb_matrix(standard) @ n
    return np.clip(n.T, 0.0, 1.0)


def rgb01_to_volts(rgb01: np.ndarray, spec: ChainSpec, *, standard: str) -> np.ndarray:
    """R′G′B′ 0…1 (N, 3) → zero-centred channel volts (3, N), as ``codes_to_volts``."""
    x = np.asarray(rgb01, dtype=np.float64).T
    if spec.space == "ypbpr":
        return rgb_to_ypbpr_matrix(standard) @ x * Y_SPAN_V - np.array([[_HALF_V], [0], [0]])
    return x * Y_SPAN_V - _HALF_V


def static_rgb(spec: ChainSpec, rgb01, *, t_kelvin: float | None = None,
               live: dict | None = None, standard: str | None = None,
               model=None) -> np.ndarray:
    """The chain's static effect on R′G′B′ values, exactly (DC solver, no tables).

    Parameters
    ----------
    spec : ChainSpec
    rgb01 : array_like, shape (N, 3)
        Full-range R′G′B′ normalised 0…1.
    t_kelvin : float, optional
        Junction temperature of every stage (default the chain's ambient).
    live : dict, optional
        Knob values (default their starting values).
    standard : str, optional
        Matrix for Y′PbPr chains (default the chain's; BT.709 for ``auto``).
    model : ChainModel-like, optional
        The circuit to use (e.g. one with perturbed parts); default ``ChainModel(spec)``.

    Returns
    -------
    ndarray, shape (N, 3), float64
        R′G′B′ 0…1 after the converter's clipping (not its quantisation).
    """
    a = np.asarray(rgb01, dtype=np.float64)
    if a.ndim != 2 or a.shape[1] != 3 or not np.all(np.isfinite(a)):
        raise ConfigError(f"expected finite R′G′B′ values of shape (N, 3), got {a.shape}",
                          key="rgb01")
    std = _standard(spec, standard)
    t = check_temperature(spec, t_kelvin)
    lv = check_live(spec, live)
    model = ChainModel(spec) if model is None else model
    v = rgb01_to_volts(a, spec, standard=std)
    out = np.stack([channel_transfer(model, c, v[c], t_kelvin=t, live=lv) for c in range(3)])
    return volts_to_rgb01(out, spec, standard=std)


# ---------------------------------------------------------------------------- 1-D tables
def _channel_lut(model, spec: ChainSpec, u: np.ndarray, *, t_kelvin, live) -> np.ndarray:
    """Normalised converter output (3, N) of each channel at normalised inputs *u*.

    Channel input volts are 0.7·u − 0.35 (Y′/R′G′B′ 0…1, Pb/Pr shifted by +½); outputs are
    clipped to the converter's extent and mapped back the same way.
    """
    lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                             converter_legal=spec.converter_legal)
    v = u * Y_SPAN_V - _HALF_V
    out = np.empty((3, u.size))
    for c in range(3):
        y = channel_transfer(model, c, v, t_kelvin=t_kelvin, live=live)
        out[c] = (np.clip(y, lim[c, 0], lim[c, 1]) + _HALF_V) / Y_SPAN_V
    return out


def _lut1d_error(y_even: np.ndarray, y_mid: np.ndarray, gain: np.ndarray, clamp: bool) -> float:
    """Worst output error of linear interpolation between float32 entries at the mid-points."""
    y32 = y_even.astype(np.float32).astype(np.float64)
    lin = 0.5 * (y32[:, :-1] + y32[:, 1:])
    if clamp:
        e = np.abs(np.clip(lin, 0, 1) - np.clip(y_mid, 0, 1)).max(axis=1)
    else:
        e = np.abs(lin - y_mid).max(axis=1)
    return float((gain * e).max()) if clamp else float(gain @ e)


def build_lut1d(spec: ChainSpec, *, t_kelvin: float, live: dict, standard: str,
                target: float = LUT1D_TARGET, n_start: int = LUT1D_START,
                n_max: int = LUT1D_MAX, model=None) -> tuple[np.ndarray, float]:
    """Per-channel 1-D table on a uniform 0…1 grid, doubled until its error ≤ *target*.

    Returns
    -------
    values : ndarray, shape (N, 3), float64
    err : float
        Worst measured interpolation error carried to R′G′B′ (0…1).
    """
    model = ChainModel(spec) if model is None else model
    if spec.space == "ypbpr":
        # an error e_c in channel c moves R′G′B′ row i by |M⁻¹[i, c]|·e_c at most
        gain = np.abs(ypbpr_to_rgb_matrix(standard)).max(axis=0)
        clamp = False
    else:
        gain = np.ones(3)
        clamp = True  # the Range clamp follows: error counts after it
    n = n_start
    u = np.linspace(0.0, 1.0, n)
    y = _channel_lut(model, spec, u, t_kelvin=t_kelvin, live=live)
    while True:
        um = 0.5 * (u[:-1] + u[1:])
        ym = _channel_lut(model, spec, um, t_kelvin=t_kelvin, live=live)
        err = _lut1d_error(y, ym, gain, clamp)
        if err <= target or 2 * n - 1 > n_max:
            return np.ascontiguousarray(y.T), err
        uf = np.empty(2 * n - 1)
        yf = np.empty((3, 2 * n - 1))
        uf[::2], uf[1::2] = u, um
        yf[:, ::2], yf[:, 1::2] = y, ym
        u, y, n = uf, yf, 2 * n - 1


# ---------------------------------------------------------------------------- 3-D tables
def lut3d_grid(n: int) -> np.ndarray:
    """R′G′B′ grid points (n³, 3) in CLF order: red slowest, blue fastest."""
    g = np.linspace(0.0, 1.0, n)
    r, gg, b = np.meshgrid(g, g, g, indexing="ij")
    return np.stack([r.ravel(), gg.ravel(), b.ravel()], axis=1)


def apply_lut3d(table: np.ndarray, rgb01: np.ndarray) -> np.ndarray:
    """Tetrahedral interpolation of an (n, n, n, 3) table at R′G′B′ points (N, 3).

    The six-tetrahedra split of each cell along its main diagonal, as the CLF
    specification describes for ``interpolation="tetrahedral"``.
    """
    n = table.shape[0]
    p = np.clip(np.asarray(rgb01, dtype=np.float64), 0.0, 1.0) * (n - 1)
    i0 = np.minimum(np.floor(p).astype(np.int64), n - 2)
    f = p - i0
    r0, g0, b0 = i0[:, 0], i0[:, 1], i0[:, 2]
    fr, fg, fb = f[:, 0:1], f[:, 1:2], f[:, 2:3]

    def at(dr, dg, db):
        return table[r0 + dr, g0 + dg, b0 + db]

    c000, c111 = at(0, 0, 0), at(1, 1, 1)
    out = np.empty_like(c000)
    cases = [
        ((fr >= fg) & (fg >= fb), (1, 0, 0), (1, 1, 0), fr, fg, fb),
        ((fr >= fb) & (fb > fg), (1, 0, 0), (1, 0, 1), fr, fb, fg),
        ((fb > fr) & (fr >= fg), (0, 0, 1), (1, 0, 1), fb, fr, fg),
        ((fg > fr) & (fr >= fb), (0, 1, 0), (1, 1, 0), fg, fr, fb),
        ((fg >= fb) & (fb > fr), (0, 1, 0), (0, 1, 1), fg, fb, fr),
        ((fb > fg) & (fg > fr), (0, 0, 1), (0, 1, 1), fb, fg, fr),
    ]
    done = np.zeros(len(p), dtype=bool)
    for cond, a, b, w1, w2, w3 in cases:
        m = cond[:, 0] & ~done
        ca, cb = at(*a)[m], at(*b)[m]
        x1, x2, x3 = w1[m], w2[m], w3[m]
        out[m] = (1 - x1) * c000[m] + (x1 - x2) * ca + (x2 - x3) * cb + x3 * c111[m]
        done |= m
    return out


def build_lut3d(spec: ChainSpec, n: int, *, t_kelvin: float, live: dict, standard: str,
                model=None, probes: int = 20000, seed: int = 0) -> tuple[np.ndarray, float]:
    """n³ table of :func:`static_rgb` and its worst measured tetrahedral error.

    The error is measured against the solver at *probes* random points of the cube plus
    the centres of a 64³ (or n−1 per edge, if fewer) grid of cells, where tetrahedral
    interpolation is furthest from its nodes.

    Returns
    -------
    table : ndarray, shape (n, n, n, 3)
    err : float
    """
    model = ChainModel(spec) if model is None else model
    vals = static_rgb(spec, lut3d_grid(n), t_kelvin=t_kelvin, live=live, standard=standard,
                      model=model)
    table = vals.reshape(n, n, n, 3)
    rng = np.random.default_rng(seed)
    pts = [rng.random((probes, 3))]
    m = min(n - 1, 64)
    c = (np.arange(m) + 0.5) / m
    r, g, b = np.meshgrid(c, c, c, indexing="ij")
    pts.append(np.stack([r.ravel(), g.ravel(), b.ravel()], axis=1))
    pts = np.concatenate(pts)
    exact = static_rgb(spec, pts, t_kelvin=t_kelvin, live=live, standard=standard,
                       model=model)
    t32 = table.astype(np.float32).astype(np.float64)
    err = float(np.abs(apply_lut3d(t32, pts) - exact).max())
    return table, err


# ---------------------------------------------------------------------------- XML
def _fmt_rows(a: np.ndarray, *, f32: bool = True) -> str:
    """Rows of numbers; LUT entries as float32 (9 digits round-trip them), matrices as
    float64 with 12 digits."""
    if f32:
        a32 = np.asarray(a, dtype=np.float32)
        return "\n".join(" ".join(f"{x:.9g}" for x in row) for row in a32)
    return "\n".join(" ".join(f"{x:.12g}" for x in row) for row in np.asarray(a, float))


#: Characters XML 1.0 (W3C, 5th ed., §2.2 "Char") does not allow anywhere in a document:
#: C0 controls other than tab, LF and CR, the surrogates, and U+FFFE / U+FFFF.
_XML_FORBIDDEN = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def _esc(s: str) -> str:
    """Text from a chain file made safe for an XML attribute or element: characters XML 1.0
    forbids are dropped, line breaks become spaces (a description stays one line), and
    ``& < > " '`` are escaped."""
    t = _XML_FORBIDDEN.sub("", str(s)).replace("\r", " ").replace("\n", " ").replace("\t", " ")
    return (t.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
            .replace('"', "&quot;").replace("'", "&apos;"))


def _matrix_node(nid: str, m: np.ndarray, offset: np.ndarray, desc: str) -> str:
    rows = np.column_stack([m, offset])
    return (f'  <Matrix id="{nid}" name="{_esc(desc)}" inBitDepth="32f" outBitDepth="32f">\n'
            f"    <Description>{_esc(desc)}</Description>\n"
            f'    <Array dim="3 4">\n{_fmt_rows(rows, f32=False)}\n    </Array>\n  </Matrix>\n')


def _range_node() -> str:
    return ('  <Range id="clamp" name="R′G′B′ clamp" inBitDepth="32f" outBitDepth="32f">\n'
            "    <Description>the output word holds 0…1 only</Description>\n"
            "    <minInValue>0</minInValue>\n    <maxInValue>1</maxInValue>\n"
            "    <minOutValue>0</minOutValue>\n    <maxOutValue>1</maxOutValue>\n  </Range>\n")


def clf_text(spec: ChainSpec, *, t_kelvin: float | None = None, live: dict | None = None,
             form: str = "auto", lut3d_size: int = 65, standard: str | None = None,
             target: float = LUT1D_TARGET) -> tuple[str, ClfReport]:
    """The CLF document of the chain and a report of what it holds (nothing written).

    Parameters are those of :func:`write_clf`.
    """
    t0 = time.perf_counter()
    if form not in FORMS:
        raise ConfigError(f"unknown CLF form; accepted: {', '.join(FORMS)}", key="form",
                          value=form)
    if form == "auto":
        form = "lut1d" if spec.space == "rgb" else "matrix-lut1d"
    if form == "lut1d" and spec.space != "rgb":
        raise ConfigError("a plain LUT1D holds R′G′B′ chains only; use 'matrix-lut1d' or "
                          "'lut3d' for a Y′PbPr chain", path=spec.path, key="form", value=form)
    if form == "matrix-lut1d" and spec.space != "ypbpr":
        form = "lut1d"  # the matrices would be the identity
    t = check_temperature(spec, t_kelvin)
    lv = check_live(spec, live)
    std = _standard(spec, standard)
    model = ChainModel(spec)
    names = channel_names(spec.space)
    knobs = ", ".join(f"{k}={v:g}" for k, v in lv.items()) or "none"
    head = [f"livecurve chain '{spec.title}' ({Path(spec.path).name})",
            f"junction temperature {t - 273.15:.2f} C; knobs: {knobs}",
            f"signal {spec.space}, matrices {std}; output converter "
            f"{spec.converter_bits}-bit {'legal' if spec.converter_legal else 'full'} range: "
            "clipping included, quantisation not"]
    body = []
    if form == "lut3d":
        n = int(lut3d_size)
        if not LUT3D_SIZES[0] <= n <= LUT3D_SIZES[1]:
            raise ConfigError(f"3-D LUT size must be {LUT3D_SIZES[0]}…{LUT3D_SIZES[1]} "
                              "(33 or 65 are usual)", key="lut3d_size", value=lut3d_size)
        table, err = build_lut3d(spec, n, t_kelvin=t, live=lv, standard=std, model=model)
        head.append(f"LUT3D {n}^3, tetrahedral; worst measured interpolation error "
                    f"{err:.3g} (R′G′B′ 0…1)")
        body.append(f'  <LUT3D id="chain" name="{_esc(spec.title)}" inBitDepth="32f" '
                    'outBitDepth="32f" interpolation="tetrahedral">\n'
                    f'    <Array dim="{n} {n} {n} 3">\n{_fmt_rows(table.reshape(-1, 3))}\n'
                    "    </Array>\n  </LUT3D>\n")
        size = n
    else:
        vals, err = build_lut1d(spec, t_kelvin=t, live=lv, standard=std, target=target,
                                model=model)
        size = vals.shape[0]
        head.append(f"LUT1D {size} entries per channel ({', '.join(names)}), linear; worst "
                    f"measured interpolation error {err:.3g} (R′G′B′ 0…1)")
        if form == "matrix-lut1d":
            body.append(_matrix_node("to_ypbpr", rgb_to_ypbpr_matrix(std),
                                     np.array([0.0, 0.5, 0.5]),
                                     f"R′G′B′ → Y′, Pb + 1/2, Pr + 1/2 ({std})"))
        body.append(f'  <LUT1D id="chain" name="{_esc(spec.title)}" inBitDepth="32f" '
                    'outBitDepth="32f" interpolation="linear">\n'
                    f"    <Description>{_esc(' / '.join(names))} through the chain and the "
                    "converter's clipping</Description>\n"
                    f'    <Array dim="{size} 3">\n{_fmt_rows(vals)}\n    </Array>\n'
                    "  </LUT1D>\n")
        if form == "matrix-lut1d":
            minv = ypbpr_to_rgb_matrix(std)
            body.append(_matrix_node("to_rgb", minv, -minv @ np.array([0.0, 0.5, 0.5]),
                                     f"Y′, Pb + 1/2, Pr + 1/2 → R′G′B′ ({std})"))
        body.append(_range_node())
    pid = f"livecurve-{Path(spec.path).stem or 'chain'}-{form}"
    desc = "".join(f"  <Description>{_esc(h)}</Description>\n" for h in head)
    text = ('<?xml version="1.0" encoding="UTF-8"?>\n'
            f'<ProcessList id="{_esc(pid)}" name="{_esc(spec.title)}" compCLFversion="3">\n'
            f"{desc}"
            "  <InputDescriptor>full-range R′G′B′ code values normalised 0…1"
            "</InputDescriptor>\n"
            "  <OutputDescriptor>full-range R′G′B′ code values normalised 0…1"
            "</OutputDescriptor>\n"
            f"{''.join(body)}</ProcessList>\n")
    rep = ClfReport("", form, size, err, time.perf_counter() - t0, std, t, lv)
    return text, rep


def write_clf(path, spec: ChainSpec, *, t_kelvin: float | None = None,
              live: dict | None = None, force: bool = True, form: str = "auto",
              lut3d_size: int = 65, standard: str | None = None) -> ClfReport:
    """Write the chain's static behaviour at one temperature and knob setting as a CLF file.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (``.clf``); written to a temporary file first and renamed when complete.
    spec : ChainSpec
    t_kelvin : float, optional
        Junction temperature of every stage, kelvin (default the chain's ambient).
    live : dict, optional
        Knob name → value (default their starting values).
    force : bool
        Replace an existing file.
    form : {"auto", "lut1d", "matrix-lut1d", "lut3d"}
        See the module docstring; ``auto`` = exact separable form for the chain's space.
    lut3d_size : int
        Cube edge for ``form="lut3d"`` (2…129; 33 or 65 usual).
    standard : str, optional
        Matrices for a Y′PbPr chain (default the chain's, BT.709 for ``auto``).

    Returns
    -------
    ClfReport

    Raises
    ------
    ConfigError
        Unknown knob, knob value out of range, bad temperature, form or size.
    OutputError
        The file exists without *force*, or cannot be written.
    """
    from livecurve.media.atomic import atomic_output
    t0 = time.perf_counter()
    text, rep = clf_text(spec, t_kelvin=t_kelvin, live=live, form=form, lut3d_size=lut3d_size,
                         standard=standard)
    with atomic_output(path, force=force) as tmp:
        tmp.write_text(text, encoding="utf-8")
    rep.path = str(path)
    rep.seconds = time.perf_counter() - t0
    return rep
