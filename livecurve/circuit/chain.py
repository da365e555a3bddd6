"""A chain realised per channel: stage netlists with per-channel overrides, knob
values and temperature, and its DC transfer by composing the stages.

Stages are composed in order, each driven by the previous stage's output through an
ideal buffer (the SPICE deck writes the same buffer as a unity VCVS), so the channel
transfer is exactly the composition of the stage transfers.
"""

from __future__ import annotations

import re

import numpy as np

from livecurve.circuit.devices import DiodeModel
from livecurve.circuit.netlist import Netlist, solve_sweep
from livecurve.circuit.stages import build_stage
from livecurve.circuit.userdeck import build_user_stage
from livecurve.config.chainfile import BJT_KEYS, DIODE_KEYS, ChainSpec, StageSpec
from livecurve.errors import SolverError


class ChainModel:
    """The circuit side of a chain file.

    Parameters
    ----------
    spec : ChainSpec
    """

    def __init__(self, spec: ChainSpec):
        self.spec = spec
        self._warm: dict = {}  # (channel, stage id) -> (first input, solution vector)

    def stages_for(self, channel: int) -> list[StageSpec]:
        """Stages acting on *channel*, in order (others pass it through)."""
        return [s for s in self.spec.stages if channel in s.channels]

    def live_defaults(self) -> dict:
        """Knob name → its starting value."""
        return {k: v.value for k, v in self.spec.live.items()}

    def values(self, channel: int, stage: StageSpec, live: dict | None = None) -> dict:
        """(stage param name → value) after per-channel overrides and knob values.

        A knob is ganged across the channels it reaches.  Where a channel also has its own
        override of the knob's parameter (a board trimmed differently), the knob moves that
        board by the same step: the override's difference from the nominal is kept (added
        for volts, fractions and plain numbers; as a ratio for ohms, amps and farads).
        """
        from livecurve.config.chainfile import nominal_value
        vals = dict(self.spec.overrides.get(channel, {}))
        out = {name: v for (sid, name), v in vals.items() if sid == stage.id}
        live = self.live_defaults() if live is None else {**self.live_defaults(), **live}
        for lname, v in live.items():
            ls = self.spec.live[lname]
            if ls.stage != stage.id:
                continue
            own = out.get(ls.param)
            nominal = nominal_value(stage, ls.param)
            if own is None or nominal is None or own == nominal:
                out[ls.param] = v
            elif ls.unit in ("ohm", "A", "F") and nominal != 0:
                out[ls.param] = v * own / nominal
            else:
                out[ls.param] = v + (own - nominal)
        return out

    def netlist(self, channel: int, stage: StageSpec, live: dict | None = None) -> Netlist:
        """The netlist of *stage* on *channel* with overrides and knob values applied."""
        changes = self.values(channel, stage, live)
        op = stage.opamp or self.spec.opamp
        if stage.kind == "netlist":
            return build_user_stage(stage.elements, stage.models, op, name=stage.id,
                                    key=f"{stage.id}.elements", path=self.spec.path,
                                    values={k.lower(): v for k, v in changes.items()})
        params = dict(stage.params)
        device = stage.device
        legs = [dict(leg) for leg in stage.legs]
        dev_changes = {}
        for name, v in changes.items():
            if name in params:
                params[name] = v
            elif name.startswith("device."):
                table = DIODE_KEYS if isinstance(device, DiodeModel) else BJT_KEYS
                dev_changes[table[name[7:]][0]] = v
            else:
                m = re.match(r"^legs\.(\d+)\.(\w+)$", name)
                if m:
                    legs[int(m.group(1))][m.group(2)] = v
        if dev_changes:
            device = device.scaled(**dev_changes)
        return build_stage(stage.kind, params, device, op, legs, name=stage.id)

    def transfer(self, channel: int, vin_v, *, t_kelvin: float | None = None,
                 live: dict | None = None, stages: list[StageSpec] | None = None,
                 temps_k: dict | None = None) -> np.ndarray:
        """DC transfer of one channel (or of a run of its stages) at each input voltage.

        Parameters
        ----------
        vin_v : array_like (N,)
            Input volts (zero-centred channel volts), in sweep order.
        t_kelvin : float, optional
            Junction temperature of every stage (default: the chain's ambient).
        temps_k : dict, optional
            Stage id → junction temperature, overriding *t_kelvin* per stage.
        stages : list, optional
            A run of this channel's stages (default: all of them).

        Returns
        -------
        ndarray (N,) float64, volts.
        """
        t = self.spec.ambient_k if t_kelvin is None else t_kelvin
        v = np.asarray(vin_v, dtype=np.float64)
        for st in (self.stages_for(channel) if stages is None else stages):
            tk = temps_k.get(st.id, t) if temps_k else t
            net = self.netlist(channel, st, live)
            order = np.argsort(v, kind="stable")
            out = np.empty_like(v)
            key = (channel, st.id)
            warm = self._warm.get(key)
            sol: list = []
            vs = v[order]
            x0 = warm[1] if warm is not None and abs(warm[0] - vs[0]) < 0.05 else None
            try:
                out[order] = solve_sweep(net, vs, t_kelvin=tk, x0=x0, solution=sol)
            except SolverError as exc:  # say which file and channel as well
                raise SolverError(f"{self.spec.path}: channel {channel}: {exc}") from None
            if sol:
                self._warm[key] = (vs[0], sol[0])
            v = out
        return v

    def transfer_all(self, vin_v, **kw) -> np.ndarray:
        """Transfer of the three channels, shape (3, N)."""
        return np.stack([self.transfer(c, vin_v, **kw) for c in range(3)])
