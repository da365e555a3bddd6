"""Line-rate dynamics of an op-amp stage: bandwidth, slew rate, parasitic resonance.

A DC sweep hides what a stage does to sharp edges.  This module models it along
each scan line, one sample per pixel at the video format's pixel clock (e.g.
74.25 MHz, 2200 samples per line for 1080p30, SMPTE ST 274).  The static part of
a stage (gain, offset, curve) lives in the tables; the sections here all have
unity gain at DC and act on the stage's output volts.

Models
------
Op-amp: single pole, A(s) = A0/(1 + s/ωa) with ωt = A0·ωa = 2π·GBW; the stage's
feedback factor is β = Rg/(Rf + Rg) = 1/NG, NG = 1 + Rf/Rg the noise gain, the
same for the inverting and the non-inverting connection (any op-amp text).
With A0 → ∞ the op-amp is an integrator, dv1/dt = ωt·v_diff, and for either
connection v_diff = β·(u − vo), u being the stage's DC (ideal) output.

1. Closed-loop bandwidth.  With vo = v1:  dvo/dt = k·(u − vo),  k = ωt/NG,
   i.e. a first-order low-pass with f_3dB = GBW/NG.
2. Slew rate.  The input stage delivers at most I_max into the compensation
   capacitance, so the *integrator node* moves at most SR = I_max/C_c:
   dv1/dt = clip(k·(u − vo), ±SR).  The limit therefore sits inside the loop on
   the first state's derivative, not after the linear pole: the output ramps at
   SR while the error exceeds SR/k and then settles exponentially with 1/k (the
   textbook large-signal step, from memory).  A rate limiter placed after the
   linear pole would instead follow an already rounded edge and reach the end
   value later.  The ngspice check in the tests uses a current-limited
   transconductor driving a capacitor, i.e. this mechanism.
3. Capacitive load (TI SLOA013, "Effect of Parasitic Capacitance in Op Amp
   Circuits": single-pole op-amp, output resistance Ro into the load C_L adds a
   pole inside the loop).  Derivation: the loaded open-loop gain is
   A(s)/(1 + s/p), p = 1/(Ro·C_L); the loop gain is L(s) = β·ωt/(s·(1 + s/p)),
   so the closed loop, normalised to unity DC gain, is

       T(s) = L/(1 + L) = β·ωt·p / (s² + p·s + β·ωt·p),

   a second-order low-pass with ω0² = β·ωt·p = 2π·GBW/(NG·Ro·C_L) and
   2ζω0 = p, i.e. ζ = ½·√(NG/(2π·GBW·Ro·C_L)).  States: v1 (integrator node,
   before Ro) and vo (output, after Ro): dv1/dt = k·(u − vo) (slew-limited as in 2),
   dvo/dt = p·(v1 − vo).  Kept finite, A0 turns the denominator into
   s² + (ωa + p)·s + ωa·p·(1 + β·A0): relative changes of order ωa/p and 1/(β·A0),
   below 1e-3 for video op-amps.  Assumed: the feedback resistors are much larger
   than Ro (they do not load the output) and no capacitance at the inverting input.
4. Explicit resonance (f0, ζ): ω0²/(s² + 2ζω0·s + ω0²), realised in the same
   two-state form with p = 2ζω0 and k = ω0/(2ζ); placed after the op-amp section.

A :class:`StageDynamics` yields its :attr:`~StageDynamics.sections` in this order:
the op-amp section (model 3 when Ro and C_L are given, else model 1; with only a
slew rate it is a pure rate limit, k = ∞), then the explicit resonance (model 4).

Discretisation
--------------
Video arrives as one held value per pixel, so a stage is discretised *exactly*
for a zero-order-hold input, all its sections together as one state-space
system (the signal between them is continuous in the circuit), once per chain
and not per frame (:mod:`livecurve.engine.linefilters`, eq. 1).  Output sample n
is the continuous output at the *end* of pixel n's hold interval: an infinitely
fast stage is then the identity, and a chain of fast stages does not drift the
picture sideways by a pixel per stage.  ``method='bilinear'`` (Tustin) is kept
for comparison with ``scipy.signal.bilinear`` + ``lfilter``; it warps
frequencies near the pixel clock and is offered for linear stages only.
Slewing is solved per sample as described in the linefilters module.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from livecurve.engine import linefilters as _lf
from livecurve.engine.linefilters import LineFilter, apply_line_filter
from livecurve.errors import ConfigError

__all__ = ["Section", "StageDynamics", "SchematicDynamics", "LineFilter", "discretise",
           "apply_line_filter", "step_response", "rise_time_s", "overshoot_fraction",
           "bandwidth_3db_hz", "summary", "pack_block", "schematic_dynamics", "stage_dynamics",
           "figures_at_format", "format_pixel_period_s"]

METHODS = _lf.METHODS
_TWO_PI = 2.0 * math.pi


def _check_positive(key: str, value, *, optional: bool = True) -> float | None:
    """Return *value* as a finite float > 0, None if allowed and absent, else ConfigError."""
    if value is None:
        if optional:
            return None
        raise ConfigError("a value is required", key=key)
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ConfigError("expected a number", key=key, value=value) from None
    if not (math.isfinite(v) and v > 0.0):
        raise ConfigError("must be a finite number > 0", key=key, value=value)
    return v


@dataclass(frozen=True)
class Section:
    """One continuous-time section with unity DC gain (models 1–4, module docstring).

    First order (``p_rad_per_s`` infinite): dx/dt = k·(u − x), y = x.
    Second order: dx1/dt = k·(u − x2), dx2/dt = p·(x1 − x2), y = x2.
    With ``slew_v_per_s`` the derivative of the first state is clipped to ±SR.

    Parameters
    ----------
    k_rad_per_s : float
        Loop rate, rad/s (> 0, may be ``inf`` for a first-order pure rate limit).
    p_rad_per_s : float
        Output pole, rad/s (``inf`` for a first-order section).
    slew_v_per_s : float or None
        Slew-rate limit of the first state, V/s.
    label : str
        Short description for chain summaries.
    """

    k_rad_per_s: float
    p_rad_per_s: float = math.inf
    slew_v_per_s: float | None = None
    label: str = ""

    @property
    def order(self) -> int:
        """1 or 2."""
        return 1 if math.isinf(self.p_rad_per_s) else 2

    @property
    def f0_hz(self) -> float:
        """Corner (first order) or natural frequency ω0/2π (second order), Hz."""
        if self.order == 1:
            return self.k_rad_per_s / _TWO_PI
        return math.sqrt(self.k_rad_per_s * self.p_rad_per_s) / _TWO_PI

    @property
    def zeta(self) -> float | None:
        """Damping ratio ζ = ½·√(p/k) of a second-order section, None for first order."""
        if self.order == 1:
            return None
        return 0.5 * math.sqrt(self.p_rad_per_s / self.k_rad_per_s)

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(A, B, C, D) of the linear part, float64; needs a finite k."""
        k, p = self.k_rad_per_s, self.p_rad_per_s
        if self.order == 1:
            return (np.array([[-k]]), np.array([[k]]), np.array([[1.0]]), np.array([[0.0]]))
        return (np.array([[0.0, -k], [p, -p]]), np.array([[k], [0.0]]),
                np.array([[0.0, 1.0]]), np.array([[0.0]]))

    def transfer_function(self) -> tuple[np.ndarray, np.ndarray]:
        """(num, den) polynomial coefficients in s of the linear part."""
        k, p = self.k_rad_per_s, self.p_rad_per_s
        if self.order == 1:
            return np.array([k]), np.array([1.0, k])
        return np.array([k * p]), np.array([1.0, p, k * p])

    def response(self, f_hz) -> np.ndarray:
        """Complex frequency response H(j·2πf) of the linear part (1 for k = ∞)."""
        s = 1j * _TWO_PI * np.asarray(f_hz, dtype=np.float64)
        if math.isinf(self.k_rad_per_s):
            return np.ones_like(s)
        num, den = self.transfer_function()
        return np.polyval(num, s) / np.polyval(den, s)


@dataclass(frozen=True)
class StageDynamics:
    """Optional dynamics of one op-amp stage; every field may be left out.

    Parameters
    ----------
    gbw_hz : float, optional
        Op-amp gain-bandwidth product, Hz.
    noise_gain : float
        1 + Rf/Rg of the stage (>= 1).
    slew_v_per_us : float, optional
        Op-amp slew rate, V/µs.
    f0_hz, zeta : float, optional
        Explicit second-order resonance after the op-amp (give both; ζ > 0).
    ro_ohm, cl_f : float, optional
        Op-amp output resistance (Ω) and load capacitance (F) inside the loop
        (give both, and ``gbw_hz``); not together with ``f0_hz``/``zeta``.
    """

    gbw_hz: float | None = None
    noise_gain: float = 1.0
    slew_v_per_us: float | None = None
    f0_hz: float | None = None
    zeta: float | None = None
    ro_ohm: float | None = None
    cl_f: float | None = None

    def __post_init__(self):
        for key in ("gbw_hz", "slew_v_per_us", "f0_hz", "zeta", "ro_ohm", "cl_f"):
            object.__setattr__(self, key, _check_positive(key, getattr(self, key)))
        ng = _check_positive("noise_gain", self.noise_gain, optional=False)
        if ng < 1.0:
            raise ConfigError("noise gain 1 + Rf/Rg cannot be below 1", key="noise_gain",
                              value=self.noise_gain)
        object.__setattr__(self, "noise_gain", ng)
        if (self.f0_hz is None) != (self.zeta is None):
            raise ConfigError("give both f0_hz and zeta for a resonance, or neither",
                              key="f0_hz" if self.f0_hz is None else "zeta")
        if (self.ro_ohm is None) != (self.cl_f is None):
            raise ConfigError("give both ro_ohm and cl_f for a capacitive load, or neither",
                              key="ro_ohm" if self.ro_ohm is None else "cl_f")
        if self.ro_ohm is not None and self.gbw_hz is None:
            raise ConfigError("a capacitive load (ro_ohm, cl_f) needs the op-amp's gbw_hz",
                              key="gbw_hz")
        if self.ro_ohm is not None and self.f0_hz is not None:
            raise ConfigError("give the resonance either as (f0_hz, zeta) or as "
                              "(ro_ohm, cl_f), not both", key="f0_hz")

    @classmethod
    def from_components(cls, *, gbw_hz: float | None = None, r_f_ohm: float | None = None,
                        r_g_ohm: float | None = None, slew_v_per_us: float | None = None,
                        ro_ohm: float | None = None, cl_f: float | None = None,
                        f0_hz: float | None = None, zeta: float | None = None
                        ) -> StageDynamics:
        """Dynamics from the stage's parts: noise gain = 1 + Rf/Rg.

        ``r_g_ohm`` is the resistor from the inverting input to the signal or
        reference source (the input resistor of an inverting stage); leave it
        out (open) or ``r_f_ohm`` out (short) for a follower, noise gain 1.
        """
        r_f = None if r_f_ohm is None else float(r_f_ohm)
        if r_f is not None and not (math.isfinite(r_f) and r_f >= 0.0):
            raise ConfigError("must be a finite resistance >= 0", key="r_f_ohm", value=r_f_ohm)
        r_g = _check_positive("r_g_ohm", r_g_ohm)
        ng = 1.0 if (r_f is None or r_g is None) else 1.0 + r_f / r_g
        return cls(gbw_hz=gbw_hz, noise_gain=ng, slew_v_per_us=slew_v_per_us, f0_hz=f0_hz,
                   zeta=zeta, ro_ohm=ro_ohm, cl_f=cl_f)

    @property
    def sections(self) -> list[Section]:
        """Continuous-time sections in signal order (module docstring)."""
        out = []
        sr = None if self.slew_v_per_us is None else self.slew_v_per_us * 1e6
        k = math.inf if self.gbw_hz is None else _TWO_PI * self.gbw_hz / self.noise_gain
        if self.ro_ohm is not None:
            p = 1.0 / (self.ro_ohm * self.cl_f)
            out.append(Section(k, p, sr, f"op-amp loop with Ro·CL (GBW {self.gbw_hz:.4g} Hz, "
                                         f"NG {self.noise_gain:.4g})"))
        elif self.gbw_hz is not None or sr is not None:
            what = "slew limit" if self.gbw_hz is None else \
                f"closed-loop pole (GBW {self.gbw_hz:.4g} Hz, NG {self.noise_gain:.4g})"
            out.append(Section(k, math.inf, sr, what))
        if self.f0_hz is not None:
            w0 = _TWO_PI * self.f0_hz
            out.append(Section(w0 / (2.0 * self.zeta), 2.0 * self.zeta * w0, None,
                               f"resonance f0 {self.f0_hz:.4g} Hz, zeta {self.zeta:.4g}"))
        return out

    @property
    def bandwidth_3db_hz(self) -> float:
        """Small-signal −3 dB frequency of the continuous model, Hz (inf if none)."""
        secs = self.sections
        return _first_3db(lambda f: np.prod([np.abs(s.response(f)) for s in secs], axis=0),
                          math.inf)


def stage_dynamics(stage, opamp=None, *, net=None, vin_v: float = 0.0,
                   t_kelvin: float | None = None, params: dict | None = None):
    """The line-rate dynamics of one chain stage, or None when it has none.

    A ``[stage.dynamics]`` table (hand figures) wins; otherwise a stage whose schematic has
    capacitors, inductors or an op-amp with a gain-bandwidth gets
    :func:`schematic_dynamics` at input *vin_v*.

    Parameters
    ----------
    stage : livecurve.config.chainfile.StageSpec
    opamp : OpampSpec, optional
        The chain's op-amp (the stage's own ``[stage.opamp]`` overrides it).
    net : Netlist, optional
        The stage's netlist as one channel builds it (per-channel overrides and knob
        values applied, e.g. ``ChainModel.netlist(channel, stage)``); default: the stage
        as written.
    vin_v : float
        Stage input volts of the operating point a schematic is linearised at.
    t_kelvin : float, optional
        Junction temperature of that operating point (default TNOM, 27 °C).
    params : dict, optional
        The stage's parameters as one channel has them (overrides and knob values
        applied, e.g. ``{**stage.params, **ChainModel.values(channel, stage)}``), for the
        noise gain of hand figures; default: the stage as written.
    """
    from livecurve.circuit.stages import KINDS, OpampSpec, build_stage
    from livecurve.circuit.userdeck import build_user_stage
    d = stage.dynamics
    if d:
        ng = d.get("noise_gain")
        if ng is None:
            kind = KINDS.get(stage.kind)
            ng = kind.noise_gain(stage.params if params is None else params) \
                if kind and kind.noise_gain else 1.0
        try:
            return StageDynamics(gbw_hz=d.get("gbw"), noise_gain=ng,
                                 slew_v_per_us=d.get("slew"), f0_hz=d.get("f_ring"),
                                 zeta=d.get("zeta"), ro_ohm=d.get("ro"), cl_f=d.get("cl"))
        except ConfigError as exc:
            raise ConfigError(str(exc), key=f"{stage.id}.dynamics") from None
    op = stage.opamp or opamp or OpampSpec()
    if net is not None:
        pass
    elif stage.kind == "netlist":
        net = build_user_stage(stage.elements, stage.models, op, name=stage.id,
                               key=f"{stage.id}.elements")
    else:
        net = build_stage(stage.kind, stage.params, stage.device, op, stage.legs,
                          name=stage.id)
    return schematic_dynamics(net, vin_v=vin_v, t_kelvin=t_kelvin)


def format_pixel_period_s(fmt: str | None) -> float:
    """Seconds per pixel of a chain's ``format`` (1080p30's 74.25 MHz for None/"auto")."""
    from livecurve.signal.timing import get_format
    return get_format("1080p30" if fmt in (None, "auto") else fmt).pixel_period_s


def figures_at_format(dyn, fmt: str | None = None, *, pixel_clock_hz: float | None = None,
                      step_v: float = 0.7) -> dict:
    """Bandwidth, rise time and overshoot of a stage as a given video format sees them.

    Parameters
    ----------
    dyn : StageDynamics or SchematicDynamics
    fmt : str, optional
        Format name (e.g. ``"1080p60"``); None or ``"auto"`` mean 1080p30.  Ignored when
        *pixel_clock_hz* is given.
    pixel_clock_hz : float, optional
        The pixel clock itself, Hz.
    step_v : float
        Step for rise time and overshoot, volts.

    Returns
    -------
    dict
        ``pixel_clock_hz``, ``bw_hz`` (−3 dB of the discrete filter), ``rise_s`` (10–90 %),
        ``overshoot`` (fraction).
    """
    if pixel_clock_hz is not None:
        t = 1.0 / _check_positive("pixel_clock_hz", pixel_clock_hz, optional=False)
    else:
        t = format_pixel_period_s(fmt)
    return {"pixel_clock_hz": 1.0 / t,
            "bw_hz": bandwidth_3db_hz(dyn, pixel_period_s=t),
            "rise_s": rise_time_s(dyn, pixel_period_s=t, step_v=step_v),
            "overshoot": overshoot_fraction(dyn, pixel_period_s=t, step_v=step_v)}


def pack_block(*, lin, c, d, end_state, slew=None, dem=None, e_slew_v=0.0, step_v=0.0,
               lin_grid=(), slw_grid=()) -> np.ndarray:
    """One block as a coefficient row (layout in :mod:`livecurve.engine.linefilters`).

    Parameters
    ----------
    lin : ndarray, shape (n, n + 1)
        [Φ | Γ] of eq. (1).
    c : ndarray, shape (n,)
        Output row C.
    d : float
        Feed-through D (eq. 2; 0 for ZOH).
    end_state : bool
        True for ZOH (output taken after the update).
    slew : tuple (sr_v_per_s, slw), optional
        Slew rate and slewing map [Σx | Σu | Σc], shape (n, n + 2).
    dem : ndarray, shape (n + 1,), optional
        Demand row [A[0] | B[0]] (needed with *slew*).
    e_slew_v, step_v : float
        SR/k and SR·T for the exact one-state rate limit.
    lin_grid, slw_grid : sequence of ndarray, optional
        The two maps for t = m·T/N_GRID, m = 1 … N_GRID − 1 (linefilters.N_GRID;
        needed with *slew* when n > 1).
    """
    lin = np.asarray(lin, dtype=np.float64)
    n = lin.shape[0]
    if not 1 <= n <= _lf.NMAX or lin.shape != (n, n + 1):
        raise ConfigError(f"a block has 1…{_lf.NMAX} states and a map of shape (n, n + 1)",
                          key="lin", value=lin.shape)
    row = np.zeros(_lf.N_COEF)
    row[_lf.K_N] = n
    row[_lf.K_END] = 1.0 if end_state else 0.0
    row[_lf.K_C:_lf.K_C + n] = c
    row[_lf.K_C + _lf.NMAX] = d

    def put(k, m):
        m = np.asarray(m, dtype=np.float64)
        view = row[k:k + _lf.MAP_LEN].reshape(_lf.NMAX, _lf.NMAX + 2)
        view[:n, :n] = m[:, :n]
        view[:n, _lf.NMAX:_lf.NMAX + m.shape[1] - n] = m[:, n:]

    put(_lf.K_LIN, lin)
    if slew is not None:
        sr, slw = slew
        row[_lf.K_SLEW] = sr
        row[_lf.K_E] = e_slew_v
        row[_lf.K_STEP] = step_v
        dem = np.asarray(dem, dtype=np.float64)
        if n > 1:
            i = int(np.argmax(np.abs(dem[:n])))
            k = dem[n]
            others = np.delete(dem[:n], i)
            if not (k > 0 and dem[i] == -k and np.all(others == 0.0)):
                raise ConfigError("a rate-limited block needs a demand row k·(u − x_i)",
                                  key="dem", value=dem.tolist())
            if not math.isclose(e_slew_v, sr / k, rel_tol=1e-12):
                raise ConfigError("e_slew_v must equal SR/k", key="e_slew_v", value=e_slew_v)
            row[_lf.K_DI] = i
        row[_lf.K_DEM:_lf.K_DEM + n] = dem[:n]
        row[_lf.K_DEM + _lf.NMAX] = dem[n]
        put(_lf.K_SLW, slw)
        if n > 1:
            if len(lin_grid) != _lf.N_GRID - 1 or len(slw_grid) != _lf.N_GRID - 1:
                raise ConfigError(f"need {_lf.N_GRID - 1} grid maps of each kind",
                                  key="lin_grid", value=len(lin_grid))
            for m in range(_lf.N_GRID - 1):
                put(_lf.K_LIN_G + m * _lf.MAP_LEN, lin_grid[m])
                put(_lf.K_SLW_G + m * _lf.MAP_LEN, slw_grid[m])
    return row


def _check_dyn(dyn) -> StageDynamics:
    if not isinstance(dyn, StageDynamics):
        raise ConfigError("expected StageDynamics", key="dyn", value=type(dyn).__name__)
    return dyn


def _combined(sections: list[Section]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(A, B, C) of sections in cascade: each section driven by the previous output."""
    n = sum(sec.order for sec in sections)
    a_all, b_all, c_all = np.zeros((n, n)), np.zeros(n), np.zeros(n)
    off, prev = 0, None
    for sec in sections:
        a, b, c, _ = sec.state_space()
        m = a.shape[0]
        a_all[off:off + m, off:off + m] = a
        if prev is None:
            b_all[off:off + m] = b[:, 0]
        else:
            p_off, p_c = prev
            a_all[off:off + m, p_off:p_off + p_c.size] += np.outer(b[:, 0], p_c)
        prev = (off, c[0])
        off += m
    c_all[off - prev[1].size:off] = prev[1]
    return a_all, b_all, c_all


def _zoh_maps(a, b, t):
    """Exact ZOH maps at period *t*: linear [Φ | Γ] and slewing [Σx | Σu | Σc].

    The slewing map is the same construction with the first state's row replaced
    by a constant rate c (ẋ0 = c), carried as an extra input.
    """
    from scipy.linalg import expm  # here, not at import: scipy costs a render ~0.5 s to start
    n = a.shape[0]
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n], aug[:n, n] = a, b
    lin = expm(aug * t)[:n, :]
    aug = np.zeros((n + 2, n + 2))
    aug[:n, :n], aug[:n, n] = a, b
    aug[0, :] = 0.0
    aug[0, n + 1] = 1.0
    slw = expm(aug * t)[:n, :]
    return lin, slw


def _block(sections: list[Section], t: float, method: str) -> np.ndarray:
    """One coefficient row (linefilters.pack_block) for sections discretised together."""
    first = sections[0]
    sr = first.slew_v_per_s
    if math.isinf(first.k_rad_per_s):              # pure rate limit: linear part = identity
        return pack_block(lin=[[0.0, 1.0]], c=[1.0], d=0.0, end_state=True,
                              slew=(sr, [[1.0, 0.0, t]]), dem=[0.0, 0.0],
                              e_slew_v=0.0, step_v=sr * t)
    a, b, c = _combined(sections)
    if method == "bilinear":
        from scipy import signal
        phi, gam, cd, dd, _ = signal.cont2discrete((a, b[:, None], c[None, :], [[0.0]]), t,
                                                   method="bilinear")
        return pack_block(lin=np.hstack([phi, gam]), c=cd[0], d=float(dd[0, 0]),
                              end_state=False)
    lin, slw = _zoh_maps(a, b, t)
    if sr is None:
        return pack_block(lin=lin, c=c, d=0.0, end_state=True)
    grid = [_zoh_maps(a, b, t * m / _lf.N_GRID) for m in range(1, _lf.N_GRID)]
    return pack_block(lin=lin, c=c, d=0.0, end_state=True, slew=(sr, slw),
                          dem=np.append(a[0], b[0]), e_slew_v=sr / first.k_rad_per_s,
                          step_v=sr * t, lin_grid=[g[0] for g in grid],
                          slw_grid=[g[1] for g in grid])


def discretise(dyn: StageDynamics, pixel_period_s: float, *, method: str = "zoh") -> LineFilter:
    """Discrete line filter for one stage at one pixel period.

    All sections of the stage are discretised *together* as one state-space
    system: the signal between the op-amp section and a following resonance is
    continuous in the circuit, and discretising each section on its own would
    treat it as held for a pixel (a visible error for sections of tens of MHz).
    Only a slew limit without a GBW (a pure rate limit) stays a block of its own
    whose output the resonance then sees sample by sample.

    Parameters
    ----------
    dyn : StageDynamics
    pixel_period_s : float
        1 / pixel clock, seconds (13.468 ns at 74.25 MHz).
    method : {"zoh", "bilinear"}
        Exact zero-order-hold discretisation (default) or Tustin's bilinear
        transform (linear stages only).

    Returns
    -------
    LineFilter
    """
    t = _check_positive("pixel_period_s", pixel_period_s, optional=False)
    if method not in METHODS:
        raise ConfigError(f"unknown method; accepted: {', '.join(METHODS)}", key="method",
                          value=method)
    if isinstance(dyn, SchematicDynamics):
        if method != "zoh":
            raise ConfigError("schematic dynamics are discretised with method='zoh' only",
                              key="method", value=method)
        from livecurve.engine.schematic import schematic_filter
        return schematic_filter(dyn, t)
    sections = _check_dyn(dyn).sections
    if any(sec.slew_v_per_s is not None for sec in sections) and method != "zoh":
        raise ConfigError("slew-rate limits are discretised with method='zoh' only",
                          key="method", value=method)
    groups = []
    if sections and math.isinf(sections[0].k_rad_per_s):
        groups.append(sections[:1])
        sections = sections[1:]
    if sections:
        groups.append(sections)
    rows = [_block(g, t, method) for g in groups]
    coef = np.array(rows) if rows else np.zeros((0, _lf.N_COEF))
    return LineFilter(coef, t, method, tuple(sec.label for g in groups for sec in g))


def step_response(dyn, *, pixel_period_s: float, n: int, step_v: float = 1.0,
                  method: str = "zoh") -> np.ndarray:
    """Response to a step from 0 V to ``step_v`` at the start of sample 0.

    Runs the same kernel as the frames, so slew limits count.  Sample j is the
    output at time (j + 1)·pixel_period_s after the step.

    Returns
    -------
    ndarray, shape (n,), float64
        Volts.
    """
    lf = dyn if isinstance(dyn, LineFilter) else discretise(dyn, pixel_period_s, method=method)
    if isinstance(n, bool) or int(n) != n or n < 1:
        raise ConfigError("need a whole number of samples >= 1", key="n", value=n)
    step = float(step_v)
    if not (math.isfinite(step) and step != 0.0):
        raise ConfigError("step must be finite and non-zero", key="step_v", value=step_v)
    line = np.full((1, int(n)), step, dtype=np.float32)
    return apply_line_filter(line, lf, blank_level_v=0.0)[0].astype(np.float64)


def _default_n(lf: LineFilter, step_v: float) -> int:
    slew_samples = 0
    for row in lf.coef:
        if row[_lf.K_SLEW] > 0:
            slew_samples += int(math.ceil(abs(step_v) / row[_lf.K_STEP]))
    return int(min(max(64, 2 * lf.memory_samples(tol=1e-6) + slew_samples + 8), 1_000_000))


def rise_time_s(dyn, *, pixel_period_s: float, step_v: float = 1.0, n: int | None = None,
                method: str = "zoh") -> float:
    """10 %–90 % rise time of the step response, seconds.

    Crossings are interpolated linearly between samples (time 0 holds 0 V), so
    the resolution is a fraction of a pixel period; nan if 90 % is never reached.
    """
    lf = discretise(dyn, pixel_period_s, method=method)
    n = _default_n(lf, step_v) if n is None else n
    y = np.concatenate(([0.0], step_response(lf, pixel_period_s=pixel_period_s, n=n,
                                             step_v=step_v))) / float(step_v)
    t = np.arange(y.size) * lf.pixel_period_s

    def crossing(level):
        idx = np.flatnonzero(y >= level)
        if idx.size == 0:
            return math.nan
        j = int(idx[0])
        return t[j - 1] + (level - y[j - 1]) / (y[j] - y[j - 1]) * (t[j] - t[j - 1])

    return float(crossing(0.9) - crossing(0.1))


def overshoot_fraction(dyn, *, pixel_period_s: float, step_v: float = 1.0,
                       n: int | None = None, method: str = "zoh") -> float:
    """Peak overshoot of the step response as a fraction of the step (>= 0)."""
    lf = discretise(dyn, pixel_period_s, method=method)
    n = _default_n(lf, step_v) if n is None else n
    y = step_response(lf, pixel_period_s=pixel_period_s, n=n, step_v=step_v) / float(step_v)
    return max(0.0, float(y.max()) - 1.0)


def _first_3db(mag, f_max: float) -> float:
    """Lowest frequency where mag(f) falls to 1/√2, by grid scan then Brent; inf if none."""
    hi = f_max if math.isfinite(f_max) else 1e13
    grid = np.geomspace(1.0, hi, 3000)
    below = np.flatnonzero(mag(grid) < math.sqrt(0.5))
    if below.size == 0:
        return math.inf
    j = int(below[0])
    if j == 0:
        return float(grid[0])
    from scipy import optimize
    return float(optimize.brentq(lambda f: float(mag(f)) - math.sqrt(0.5), grid[j - 1],
                                 grid[j], xtol=1e-12 * grid[j], rtol=1e-12))


def bandwidth_3db_hz(dyn, *, pixel_period_s: float, method: str = "zoh") -> float:
    """Small-signal −3 dB frequency of the *discrete* filter, Hz (inf below Nyquist if none).

    This is what the picture sees at the given pixel clock; slew limits are
    ignored (small signals do not slew).
    """
    lf = discretise(dyn, pixel_period_s, method=method)
    return _first_3db(lambda f: np.abs(lf.response(f)), 0.5 / lf.pixel_period_s)


def summary(dyn: StageDynamics, *, pixel_period_s: float, step_v: float = 0.7) -> dict:
    """Figures a chain summary prints for one stage.

    Parameters
    ----------
    dyn : StageDynamics
    pixel_period_s : float
        1 / pixel clock, seconds.
    step_v : float
        Step used for rise time and overshoot, volts (0.7 V: black to white; it
        matters only when the stage slews).

    Returns
    -------
    dict
        ``sections`` (labels), ``bandwidth_3db_hz`` (discrete, what the picture
        sees), ``bandwidth_3db_hz_continuous``, ``rise_time_s`` (10–90 %),
        ``overshoot_fraction``, ``memory_samples`` (decay to 1e-4).
    """
    lf = discretise(dyn, pixel_period_s)
    return {"sections": list(lf.labels),
            "bandwidth_3db_hz": bandwidth_3db_hz(dyn, pixel_period_s=pixel_period_s),
            "bandwidth_3db_hz_continuous": dyn.bandwidth_3db_hz,
            "rise_time_s": rise_time_s(dyn, pixel_period_s=pixel_period_s, step_v=step_v),
            "overshoot_fraction": overshoot_fraction(dyn, pixel_period_s=pixel_period_s,
                                                     step_v=step_v),
            "memory_samples": lf.memory_samples(tol=1e-4)}


# dynamics derived from a stage's schematic live in their own module (re-exported here)
from livecurve.engine.schematic import SchematicDynamics, schematic_dynamics  # noqa: E402
