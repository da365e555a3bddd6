"""Junction temperatures over time: ambient warm-up plus each stage's self-heating.

Model
-----
* **Ambient.**  Constant at the chain's ``ambient``, or — when the chain has a
  ``[thermal]`` table with ``warmup_to`` and ``tau`` — a first-order warm-up, the step
  response of a single thermal RC (Newton's law of cooling, any heat-transfer text)::

      T_amb(t) = T0 + (T1 − T0)·(1 − exp(−t/τ)),   T0 = ambient, T1 = warmup_to

* **Self-heating.**  Each stage with a thermal resistance ``rth`` (K/W, junction to
  ambient; 0 = none) heats its junctions by the power they dissipate at the operating
  point: ``T_j = T_amb + rth·P`` with P = Σ over the stage's junctions of |I·V| at their
  terminals (a diode: its current times the voltage across it, series resistance
  included; a BJT: IC·VCE + IB·VBE).  Currents come from the same device laws the DC
  solver uses (Shockley / Ebers–Moll transport form, SPICE temperature laws).  Because
  P depends on T_j (IS rises with temperature), T_j is found by fixed-point iteration;
  an iteration that does not settle is thermal runaway and is reported as such.
  Resistors and the op-amp itself dissipate too, but nothing in the models has a
  temperature coefficient for them, so only junctions are counted.

Simplifications (stated, not hidden)
------------------------------------
* The operating point is taken at one input level per channel (``signal_v``, centred
  volts; 0 V is mid-grey on Y′ and R′G′B′ and no colour on Pb/Pr), not the picture's
  average: a junction's own thermal time constant (ms to s) averages the signal anyway.
* Self-heating is quasi-static: it follows the ambient instantly.  Only the ambient has
  a time constant.
* The engine keeps one temperature per stage, while each channel has its own board: a
  stage acting on several channels gets the hottest of its channels' junctions.

:class:`TableFollower` tells a :class:`~livecurve.engine.pipeline.FrameEngine` to rebuild
its tables only when some junction moved by more than a threshold (0.25 K by default: at
the ≈ −2 mV/K of a junction that is ≈ 0.5 mV before any gain), so preview and render can
run with drift on, with model time sped up for preview.
"""

from __future__ import annotations

import math

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.circuit.devices import BjtModel, DiodeModel, thermal_voltage
from livecurve.circuit.netlist import GROUND, solve_sweep
from livecurve.config.chainfile import ChainSpec
from livecurve.errors import ConfigError, SolverError

#: Default temperature change that triggers a table rebuild, kelvin.
REBUILD_THRESHOLD_K = 0.25
#: Self-heating fixed point: stop when no junction moves more than this, kelvin.
FIXED_POINT_TOL_K = 1e-4
FIXED_POINT_MAX_ITER = 30
#: A junction past this is taken as runaway, kelvin (200 °C: beyond the 150–200 °C rating of
#: silicon junctions, common practice).
T_RUNAWAY_K = 473.15


def warmup_ambient_k(t_s: float, *, t0_k: float, t1_k: float, tau_s: float) -> float:
    """First-order warm-up T0 + (T1 − T0)·(1 − exp(−t/τ)), kelvin.

    Parameters
    ----------
    t_s : float
        Seconds since power-on (≥ 0).
    t0_k, t1_k : float
        Starting and final ambient, kelvin.
    tau_s : float
        Time constant, seconds (> 0).
    """
    return t0_k + (t1_k - t0_k) * -math.expm1(-t_s / tau_s)


def _v(x: np.ndarray, idx: dict, node: str) -> float:
    return 0.0 if node in GROUND else float(x[idx[node]])


def junction_power_w(net, x: np.ndarray, node_index: dict, t_kelvin: float) -> float:
    """Power dissipated in the junctions of a solved stage netlist, watts.

    Parameters
    ----------
    net : Netlist
        The stage netlist (its D and Q elements are counted).
    x : ndarray (n_unknowns,)
        The DC solution (``solve_sweep(..., node="*")`` row).
    node_index : dict
        Node name → index into *x* (``Compiled.node_index``).
    t_kelvin : float
        Junction temperature the solution was found at.

    Returns
    -------
    float
        Σ |I·V| at the terminals (series resistances of the device included).
    """
    vt = thermal_voltage(t_kelvin)
    total = 0.0
    for el in net.elements:
        if el.kind == "D":
            m: DiodeModel = el.model
            a, c = el.nodes
            inner = f"{el.name}#a" if m.rs_ohm > 0 else a
            vj = _v(x, node_index, inner) - _v(x, node_index, c)
            cur = m.is_at(t_kelvin) * math.expm1(min(vj / (m.n * vt), 80.0))
            total += abs(cur * (_v(x, node_index, a) - _v(x, node_index, c)))
        elif el.kind == "Q":
            q: BjtModel = el.model
            c, b, e = el.nodes
            ci = f"{el.name}#c" if q.rc_ohm > 0 else c
            bi = f"{el.name}#b" if q.rb_ohm > 0 else b
            ei = f"{el.name}#e" if q.re_ohm > 0 else e
            pol = 1.0 if q.polarity == "npn" else -1.0
            vbe = pol * (_v(x, node_index, bi) - _v(x, node_index, ei))
            vbc = pol * (_v(x, node_index, bi) - _v(x, node_index, ci))
            is_t = q.is_at(t_kelvin)
            bfac = q.beta_factor(t_kelvin)
            i_f = is_t * math.expm1(min(vbe / (q.nf * vt), 80.0))
            i_r = is_t * math.expm1(min(vbc / (q.nr * vt), 80.0))
            ic = pol * (i_f - i_r - i_r / (q.br * bfac))  # Ebers–Moll transport form
            ib = pol * (i_f / (q.bf * bfac) + i_r / (q.br * bfac))
            vce = _v(x, node_index, c) - _v(x, node_index, e)
            vbe_t = _v(x, node_index, b) - _v(x, node_index, e)
            total += abs(ic * vce + ib * vbe_t)
    return total


class ThermalModel:
    """Ambient profile and self-heating of a chain's junctions.

    Parameters
    ----------
    spec : ChainSpec
    live : dict, optional
        Knob values the operating points are taken at (default: the knobs' starting values).

    Raises
    ------
    ConfigError
        ``[thermal]`` gives ``warmup_to`` without ``tau``.
    """

    def __init__(self, spec: ChainSpec, *, live: dict | None = None):
        self.spec = spec
        self.model = ChainModel(spec)
        self.live = live
        th = spec.thermal or {}
        self.t0_k = spec.ambient_k
        self.t1_k = th.get("warmup_to_k")
        self.tau_s = th.get("tau_s")
        if self.t1_k is not None and self.tau_s is None:
            raise ConfigError("a warm-up needs its time constant: add thermal.tau "
                              "(e.g. tau = \"600s\")", path=spec.path, key="thermal.warmup_to",
                              value=self.t1_k - 273.15)
        self.heated = [s for s in spec.stages if s.rth_k_per_w > 0]
        self._cache: dict = {}

    # ---- ambient -----------------------------------------------------------------------
    def ambient_at(self, t_s: float) -> float:
        """Ambient temperature at *t_s* seconds after power-on, kelvin."""
        t = float(t_s)
        if not math.isfinite(t) or t < 0:
            raise ConfigError("time must be a finite number of seconds ≥ 0", key="t_s",
                              value=t_s)
        if self.t1_k is None:
            return self.t0_k
        return warmup_ambient_k(t, t0_k=self.t0_k, t1_k=self.t1_k, tau_s=self.tau_s)

    # ---- self-heating ------------------------------------------------------------------
    def _levels(self, signal_v) -> tuple[float, float, float]:
        lv = np.broadcast_to(np.asarray(signal_v, dtype=np.float64), (3,))
        if not np.all(np.isfinite(lv)):
            raise ConfigError("signal level must be finite volts", key="signal_v",
                              value=signal_v)
        return tuple(float(v) for v in lv)

    def dissipation_w(self, temps_k: dict, *, t_ambient_k: float,
                      signal_v=0.0) -> dict:
        """Junction power of each self-heated stage at given junction temperatures.

        Parameters
        ----------
        temps_k : dict
            Stage id → junction temperature, kelvin (missing stages: *t_ambient_k*).
        t_ambient_k : float
            Ambient, kelvin.
        signal_v : float or sequence of 3 floats
            Chain input level per channel, centred volts.

        Returns
        -------
        dict
            Stage id → watts (largest over the channels the stage acts on); only stages
            with ``rth`` > 0.
        """
        levels = self._levels(signal_v)
        out = {}
        for st in self.heated:
            worst = 0.0
            for ch in st.channels:
                stages = self.model.stages_for(ch)
                before = stages[:stages.index(st)]
                vin = np.array([levels[ch]])
                if before:
                    vin = self.model.transfer(ch, vin, t_kelvin=t_ambient_k, live=self.live,
                                              stages=before, temps_k=temps_k)
                tj = temps_k.get(st.id, t_ambient_k)
                net = self.model.netlist(ch, st, self.live)
                comp = net.compile(tj)
                x = solve_sweep(comp, vin, t_kelvin=tj, node="*")[0]
                worst = max(worst, junction_power_w(net, x, comp.node_index, tj))
            out[st.id] = worst
        return out

    def junction_temps(self, t_ambient_k: float, *, signal_v=0.0) -> dict:
        """Stage id → junction temperature at ambient *t_ambient_k* (self-heating solved).

        Raises
        ------
        SolverError
            The fixed point does not settle (thermal runaway).
        """
        key = (round(float(t_ambient_k), 6), self._levels(signal_v))
        hit = self._cache.get(key)
        if hit is not None:
            return dict(hit)
        temps = {s.id: float(t_ambient_k) for s in self.spec.stages}
        settled = not self.heated
        for _ in range(FIXED_POINT_MAX_ITER if self.heated else 0):
            p = self.dissipation_w(temps, t_ambient_k=t_ambient_k, signal_v=signal_v)
            moved = 0.0
            for st in self.heated:
                new = t_ambient_k + st.rth_k_per_w * p[st.id]
                moved = max(moved, abs(new - temps[st.id]))
                temps[st.id] = min(new, T_RUNAWAY_K) if math.isfinite(new) else T_RUNAWAY_K
            if max(temps.values()) >= T_RUNAWAY_K:
                break
            if moved <= FIXED_POINT_TOL_K:
                settled = True
                break
        if not settled:
            hot = max(self.heated, key=lambda s: temps[s.id])
            raise SolverError(f"{self.spec.path}: self-heating does not settle (thermal "
                              f"runaway): stage '{hot.id}' with rth = {hot.rth_k_per_w:g} K/W "
                              f"reached {temps[hot.id] - 273.15:.1f} °C; lower its rth or its "
                              "junction current")
        if len(self._cache) > 4096:
            self._cache.clear()
        self._cache[key] = dict(temps)
        return temps

    def temps_at(self, t_s: float, *, signal_v=0.0) -> tuple[float, dict]:
        """(ambient, {stage id: junction temperature}) at *t_s* seconds, kelvin.

        Every stage of the chain is in the dict; stages without ``rth`` sit at the ambient.
        """
        amb = self.ambient_at(t_s)
        return amb, self.junction_temps(amb, signal_v=signal_v)


class TableFollower:
    """Rebuild an engine's tables when the junction temperatures have moved enough.

    Parameters
    ----------
    thermal : ThermalModel
    threshold_k : float
        Rebuild when any stage's junction is more than this away from the temperature the
        engine's tables were built at, kelvin (default 0.25 K).
    speedup : float, optional
        Model time = *speedup* × the time passed to :meth:`maybe_update` (preview can show a
        20-minute warm-up in a minute).  Default: the chain's ``thermal.speedup`` if the
        chain file carries it, else 1.
    signal_v : float or sequence of 3 floats
        Operating-point input level for self-heating, centred volts.
    """

    def __init__(self, thermal: ThermalModel, *, threshold_k: float = REBUILD_THRESHOLD_K,
                 speedup: float | None = None, signal_v=0.0):
        if not (threshold_k > 0 and math.isfinite(threshold_k)):
            raise ConfigError("rebuild threshold must be a positive number of kelvin",
                              key="threshold_k", value=threshold_k)
        if speedup is None:
            speedup = float(thermal.spec.thermal.get("speedup", 1.0))
        if not (speedup > 0 and math.isfinite(speedup)):
            raise ConfigError("time speed-up must be a positive number", key="speedup",
                              value=speedup)
        self.thermal = thermal
        self.threshold_k = float(threshold_k)
        self.speedup = float(speedup)
        self.signal_v = signal_v
        self.rebuilds = 0
        #: (ambient, temps) of the last rebuild this follower asked for.
        self.last: tuple[float, dict] | None = None

    def moved_k(self, engine, temps_k: dict) -> float:
        """Largest |target − built| junction temperature over the chain's stages, kelvin."""
        st = engine.state
        return max((abs(t - st.temps_k.get(sid, st.t_kelvin)) for sid, t in temps_k.items()),
                   default=0.0)

    def maybe_update(self, engine, t_s: float) -> bool:
        """Move *engine* to the temperatures at time *t_s* if they moved past the threshold.

        Parameters
        ----------
        engine : FrameEngine
            Its ``state`` says what its tables were built at.
        t_s : float
            Seconds since the start (wall-clock or clip time); multiplied by ``speedup``.

        Returns
        -------
        bool
            True when the tables were rebuilt.
        """
        amb, temps = self.thermal.temps_at(float(t_s) * self.speedup, signal_v=self.signal_v)
        if self.moved_k(engine, temps) <= self.threshold_k:
            return False
        engine.set_temperature(amb, temps_k=temps)
        self.rebuilds += 1
        self.last = (amb, dict(temps))
        return True
