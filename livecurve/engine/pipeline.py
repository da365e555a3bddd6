"""The per-frame engine: each channel through its chain, as fused tables and line filters.

For each channel the chain is cut into *runs*: consecutive static stages fuse into one
table (built by the DC solver, :mod:`livecurve.engine.tables`); a stage with dynamics
ends its run, and its line filter (:mod:`livecurve.engine.dynamics`) runs along every
scan line after the run's table.  A run that holds a modulated knob gets a 2-D table
over (input volts × knob value); two modulated knobs never share a run (the run is cut
between their stages), so two independent control buses work.

Frames are planar float32 (3, H, W) zero-centred channel volts; ``process`` writes
into a preallocated output and allocates nothing per frame in steady state.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec, StageSpec
from livecurve.engine import tables as _tables
from livecurve.errors import ConfigError
from livecurve.signal.component import centre_offsets_v

#: Extra room around a run's input domain for overshoot of an earlier dynamic stage.
DOMAIN_MARGIN = 0.25


@dataclass
class Run:
    """Stages of one channel evaluated as one table, then an optional line filter."""

    channel: int
    stages: list
    knob: str | None = None  # live name on the table's second axis
    table: _tables.Table | None = None
    dynamics: object | None = None  # StageDynamics of the last stage, if any
    line_filter: object | None = None
    dyn_key: tuple | None = None  # the knobs and temperature *dynamics* was derived at
    blank_in_v: float = 0.0
    blank_out_v: float = 0.0
    lo_v: float = -0.5
    hi_v: float = 0.5
    next_lo_v: float = -0.5   # the input domain the run hands the next one
    next_hi_v: float = 0.5
    build_s: float = 0.0


@dataclass
class EngineState:
    """What the engine was built at: knob values and junction temperatures."""

    live: dict = field(default_factory=dict)
    t_kelvin: float = 300.15
    temps_k: dict = field(default_factory=dict)


def stage_dynamics(stage: StageSpec, opamp=None, net=None, *, t_kelvin=None, params=None):
    """The stage's line-rate dynamics (hand figures or from its schematic), or None.

    See :func:`livecurve.engine.dynamics.stage_dynamics`."""
    from livecurve.engine.dynamics import stage_dynamics as _dynamics
    return _dynamics(stage, opamp, net=net, t_kelvin=t_kelvin, params=params)


class FrameEngine:
    """Apply a chain to frames of zero-centred channel volts.

    Parameters
    ----------
    spec : ChainSpec
    modulated : iterable of str
        Live knob names driven per frame/row/pixel by control sources (2-D tables).
    pixel_period_s : float
        Seconds per picture column on the video timing (for line filters).
    lead_in_samples : int
        Picture columns' worth of horizontal blanking before the active line.
    exact : bool
        Evaluate every pixel with the DC solver instead of tables (slow; verification).
    """

    def __init__(self, spec: ChainSpec, *, modulated=(), pixel_period_s: float = 1 / 74.25e6,
                 lead_in_samples: int = 0, exact: bool = False, t_kelvin: float | None = None,
                 live: dict | None = None, target_err_v: float = _tables.TARGET_ERR_V):
        self.spec = spec
        self.model = ChainModel(spec)
        self.modulated = tuple(modulated)
        for name in self.modulated:
            if name not in spec.live:
                raise ConfigError(f"no live parameter '{name}'; live: "
                                  f"{', '.join(spec.live) or 'none'}", path=spec.path,
                                  key="live", value=name)
        self.pixel_period_s = pixel_period_s
        self.lead_in_samples = lead_in_samples
        self.exact = exact
        self.target_err_v = target_err_v
        self.state = EngineState(live=self.model.live_defaults(),
                                 t_kelvin=spec.ambient_k if t_kelvin is None else t_kelvin)
        if live:
            self.state.live.update(live)
        # a modulated knob's line filter stays at the knob's starting value (one filter a
        # frame; the control moves the 2-D table, not the filter)
        self._filter_live = {n: self.state.live[n] for n in self.modulated}
        self.runs: list[list[Run]] = [self._plan(ch) for ch in range(3)]
        self.rebuild()

    # ---- planning and building ----------------------------------------------------------
    def _knob_of(self, stage: StageSpec) -> str | None:
        knobs = [n for n in self.modulated if self.spec.live[n].stage == stage.id]
        if len(knobs) > 1:
            raise ConfigError("two modulated parameters on one stage are not supported",
                              path=self.spec.path, key=f"live ({', '.join(knobs)})")
        return knobs[0] if knobs else None

    def _turnable(self, stage: StageSpec) -> bool:
        """The stage holds a knob the user turns that is not modulated."""
        return any(ls.stage == stage.id and n not in self.modulated
                   for n, ls in self.spec.live.items())

    def _plan(self, ch: int) -> list[Run]:
        """Group the channel's stages into runs: one table (and the last stage's line
        filter) each.  A run ends at a stage with dynamics, and a modulated knob's stage
        never shares a run with another modulated knob's stage or with a stage whose knob
        is turned by hand: turning that knob then rebuilds a 1-D table of its own, not the
        modulated run's 2-D table (milliseconds instead of most of a second)."""
        runs: list[Run] = []
        cur: Run | None = None
        cur_turnable = False
        for st in self.model.stages_for(ch):
            knob = self._knob_of(st)
            turnable = self._turnable(st)
            if cur is None or (knob and cur.knob and knob != cur.knob) \
                    or (knob and cur_turnable) or (turnable and cur.knob):
                cur = Run(ch, [])
                runs.append(cur)
                cur_turnable = False
            cur.stages.append(st)
            cur.knob = cur.knob or knob
            cur_turnable = cur_turnable or turnable
            # the channel's own netlist (its overrides, the knobs' starting values)
            dyn = self._stage_dynamics(ch, st)
            if dyn is not None:
                cur.dynamics = dyn
                cur.dyn_key = self._dyn_key(st)
                cur = None
        return runs

    def _dyn_key(self, stage: StageSpec) -> tuple:
        """What a stage's dynamics depend on: its knobs' values and its temperature."""
        live = self._dyn_live()
        knobs = tuple(sorted((n, live[n]) for n, ls in self.spec.live.items()
                             if ls.stage == stage.id and n in live))
        temps = self.state.temps_k or {}
        return knobs, float(temps.get(stage.id, self.state.t_kelvin))

    def _dyn_live(self) -> dict:
        """Knob values for line filters: the present ones, modulated knobs at their start."""
        return {**self.state.live, **self._filter_live}

    def _stage_dynamics(self, ch: int, stage: StageSpec):
        """The stage's dynamics on channel *ch* at the present knobs and temperature: the
        schematic linearised at its junction temperature with the knobs' values in it, or
        hand figures whose noise gain follows the knobs (a gain knob moves the closed-loop
        bandwidth, GBW / noise gain)."""
        live = self._dyn_live()
        params = {**stage.params, **{k: v for k, v in self.model.values(ch, stage, live).items()
                                     if k in stage.params}}
        return stage_dynamics(stage, self.spec.opamp, self.model.netlist(ch, stage, live),
                              t_kelvin=self._dyn_key(stage)[1], params=params)

    def rebuild(self, *, channels=(0, 1, 2), first_run: dict | None = None) -> None:
        """(Re)build every run's table and filter at the present knobs and temperature.

        *first_run* (channel → run index) starts a channel's rebuild at that run: the runs
        before it are unchanged (a knob further down the chain), so is their output."""
        import time

        from livecurve.engine.dynamics import discretise
        offs = centre_offsets_v(self.spec.space)
        lo0, hi0 = self.spec.sweep_v
        for ch in channels:
            lo, hi = lo0, hi0
            blank = -offs[ch] if offs[ch] else 0.0
            k0 = (first_run or {}).get(ch, 0)
            if k0 > 0:      # carry on from the unchanged run before (as the loop below would)
                prev = self.runs[ch][k0 - 1]
                lo, hi, blank = prev.next_lo_v, prev.next_hi_v, prev.blank_out_v
            for run in self.runs[ch][k0:]:
                t0 = time.perf_counter()
                run.lo_v, run.hi_v = lo, hi
                run.blank_in_v = blank
                if not self.exact:
                    run.table = self._build(run)
                    out_lo, out_hi = run.table.out_range()
                else:
                    ys = self._solve(run, np.linspace(lo, hi, 257), None)
                    out_lo, out_hi = float(ys.min()), float(ys.max())
                run.blank_out_v = self._blank_out(run, blank)
                if run.dynamics is not None:
                    # the dynamics follow the last stage's knobs and junction temperature
                    # (a modulated knob's filter stays where the knob was last set); the
                    # filter is made again only when they changed
                    dkey = self._dyn_key(run.stages[-1])
                    if dkey != run.dyn_key:
                        dyn = self._stage_dynamics(ch, run.stages[-1])
                        if dyn is not None:
                            run.dynamics = dyn
                        run.dyn_key = dkey
                    key = (run.dynamics, self.pixel_period_s)
                    if run.line_filter is None or getattr(run, "_lf_key", None) != key:
                        run.line_filter = discretise(run.dynamics, self.pixel_period_s)
                        run._lf_key = key
                    span = max(out_hi - out_lo, 1e-3)
                    lo, hi = out_lo - DOMAIN_MARGIN * span, out_hi + DOMAIN_MARGIN * span
                else:
                    lo, hi = out_lo, out_hi
                    if hi - lo < 1e-6:
                        hi = lo + 1e-6
                blank = run.blank_out_v
                run.next_lo_v, run.next_hi_v = lo, hi
                run.build_s = time.perf_counter() - t0

    def _blank_out(self, run: Run, blank_v: float) -> float:
        """The run's static output for a pixel at the blanking level, evaluated the way every
        pixel is (float32 input through the table, or the solver in exact mode), so the line
        filter's rest level is exactly what a line at blanking hands it."""
        x = np.full((1, 1), blank_v, dtype=np.float32)
        y = np.empty_like(x)
        ctl = self.state.live.get(run.knob) if run.knob else None
        if self.exact:
            self._exact(run, x, ctl, y)
        else:
            _tables.apply_table(x, run.table, control=ctl, out=y)
        return float(y[0, 0])

    def _solve(self, run: Run, v: np.ndarray, knob_value) -> np.ndarray:
        live = dict(self.state.live)
        if run.knob is not None and knob_value is not None:
            live[run.knob] = knob_value
        return self.model.transfer(run.channel, v, t_kelvin=self.state.t_kelvin, live=live,
                                   stages=run.stages, temps_k=self.state.temps_k or None)

    def _build(self, run: Run) -> _tables.Table:
        if run.knob is None:
            return _tables.build_table_1d(lambda v: self._solve(run, v, None), run.lo_v,
                                          run.hi_v, target_v=self.target_err_v)
        ls = self.spec.live[run.knob]
        return _tables.build_table_2d(lambda v, c: self._solve(run, v, c), run.lo_v, run.hi_v,
                                      ls.lo, ls.hi, target_v=self.target_err_v)

    # ---- knobs and temperature ----------------------------------------------------------
    def set_live(self, name: str, value: float) -> None:
        """Turn a knob; rebuilds only the runs that hold its stage (unless it is modulated)."""
        ls = self.spec.live[name]
        self.state.live[name] = float(np.clip(value, ls.lo, ls.hi))
        if name in self.modulated:
            return
        first = {}
        for ch in range(3):
            hit = [k for k, r in enumerate(self.runs[ch]) if ls.stage in [s.id for s in r.stages]]
            if hit:
                first[ch] = hit[0]
        self.rebuild(channels=list(first), first_run=first)

    def set_temperature(self, t_kelvin: float, temps_k: dict | None = None) -> None:
        """Move every junction to *t_kelvin* (or per stage *temps_k*) and rebuild."""
        self.state.t_kelvin = float(t_kelvin)
        self.state.temps_k = dict(temps_k or {})
        self.rebuild()

    @property
    def worst_table_err_v(self) -> float:
        """Largest measured table bound over every run (0 in exact mode)."""
        errs = [r.table.err_v for rs in self.runs for r in rs if r.table is not None]
        return max(errs) if errs else 0.0

    # ---- per frame ------------------------------------------------------------------------
    def process(self, planes: np.ndarray, *, controls: dict | None = None,
                out: np.ndarray | None = None) -> np.ndarray:
        """Run one frame through the chain.

        Parameters
        ----------
        planes : ndarray (3, H, W) float32
            Zero-centred channel volts.
        controls : dict, optional
            Modulated knob name → value in the knob's units: a scalar, one per row (H,)
            or one per pixel (H, W).  Knobs not given sit at their present value.
        out : ndarray (3, H, W) float32, optional
            Output buffer (may not be *planes*).

        Returns
        -------
        ndarray (3, H, W) float32, volts.
        """
        if planes.dtype != np.float32 or planes.ndim != 3 or planes.shape[0] != 3:
            raise TypeError("planes must be float32 of shape (3, H, W)")
        if out is None:
            out = np.empty_like(planes)
        controls = controls or {}
        for ch in range(3):
            runs = self.runs[ch]
            if not runs:
                out[ch] = planes[ch]
                continue
            src = planes[ch]
            for run in runs:
                ctl = controls.get(run.knob, self.state.live.get(run.knob)) if run.knob else None
                if self.exact:
                    self._exact(run, src, ctl, out[ch])
                else:
                    _tables.apply_table(src, run.table, control=ctl, out=out[ch])
                if run.line_filter is not None:
                    from livecurve.engine.linefilters import apply_line_filter
                    apply_line_filter(out[ch], run.line_filter, blank_level_v=run.blank_out_v,
                                      lead_in_samples=self.lead_in_samples, out=out[ch])
                src = out[ch]
        return out

    def _exact(self, run: Run, src: np.ndarray, ctl, dst: np.ndarray) -> None:
        """Solver per distinct (value[, control]) — the slow reference path."""
        if ctl is None or np.ndim(ctl) == 0:
            vals, inv = np.unique(src, return_inverse=True)
            y = self._solve(run, vals.astype(np.float64), None if ctl is None else float(ctl))
            dst[...] = y[inv].reshape(src.shape).astype(np.float32)
            return
        c = np.asarray(ctl, dtype=np.float64)
        if c.ndim == 1:
            c = np.broadcast_to(c[:, None], src.shape)
        for cv in np.unique(c):
            m = c == cv
            vals, inv = np.unique(src[m], return_inverse=True)
            y = self._solve(run, vals.astype(np.float64), float(cv))
            dst[m] = y[inv].astype(np.float32)

    def summary_rows(self) -> list[dict]:
        """One row per run: channel, stages, table size and bound, dynamics figures."""
        rows = []
        for ch in range(3):
            for run in self.runs[ch]:
                rows.append({"channel": ch, "stages": [s.id for s in run.stages],
                             "knob": run.knob,
                             "table_n": None if run.table is None else run.table.values.shape,
                             "err_v": None if run.table is None else run.table.err_v,
                             "domain_v": (run.lo_v, run.hi_v), "build_s": run.build_s,
                             "dynamics": run.dynamics})
        return rows
