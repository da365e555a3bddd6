"""Component spread: Monte Carlo over part tolerances, the colour cast it puts on grey, and
which parts matter most.

Distributions (chosen here; a chain-level override can replace :class:`Tolerances`)
-------------------------------------------------------------------------------
* **Resistors**: every R of every stage netlist (input, feedback, offset, the two halves of
  a pot, break-point legs, attenuators) is scaled by 1 + δ.  Default ``"gauss"``: δ normal
  with 3σ = the tolerance class (1 %), the usual reading of a tolerance band as a ±3σ
  process limit (common practice); ``"uniform"``: δ uniform on ±tolerance (the
  worst-case reading).  Untruncated.
* **Junction saturation current IS** (diodes and BJTs): scaled by exp(σ·z), z standard
  normal, with 3σ = ln(1 + 0.30): log-normal, 99.7 % of parts within ×1.3 / ÷1.3 of the
  model value.  This ±30 % is an *assumption* (from memory, typical of small-signal parts
  of one type and maker; across makers IS varies far more).
* **BJT forward β (BF)**: log-normal the same way with 3σ = ln(1.5) (assumption, from
  memory: β groups of one part type span about ×1.5 either way).
* **Channel mismatch**: each channel is a separate board, so every channel's parts are
  drawn independently (``mismatch=False`` draws each part once for all channels).
* Not perturbed: op-amp gain and rails, voltage references, current sources, pot wiper
  positions (set by hand), junction N/EG/XTI.

Colour cast on grey
-------------------
A grey ramp (R′ = G′ = B′ from 0 to 1) goes through the static path of
:func:`livecurve.outputs.clf.static_rgb` (codes → volts → chain → converter clipping, no
quantisation → R′G′B′ 0…1).  Each result is shown on a reference display: BT.1886 EOTF
with black 0 and white 1 (R′^2.4; ITU-R BT.1886), BT.709 primaries and D65 white
(ITU-R BT.709, whatever the chain's matrix: a simplification), then CIE XYZ → CIELAB
relative to D65 white, and CIEDE2000 (CIE 142-2001; computed by colour-science) against

* the nominal chain's output for the same step (``delta_e``: lightness and colour), and
* the neutral grey of the same L* (``cast``: the colour that mismatch adds).

Sensitivity ranking
-------------------
One part at a time at its tolerance limits (R at 1 ± t; IS and β at ×/÷ their 3σ factor),
everything else nominal; the effect is the largest |Δout| over the sweep, in millivolts,
worst of the two limits and of the channels the part sits on.
"""

from __future__ import annotations

import json as _json
import math
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec
from livecurve.errors import ConfigError
from livecurve.outputs.clf import check_live, check_temperature, rgb01_to_volts, volts_to_rgb01
from livecurve.outputs.progress import Progress
from livecurve.signal.component import channel_names

DISTRIBUTIONS = ("gauss", "uniform")
MAX_TRIALS = 1_000_000
#: Trials per block: the unit of work sent to a Dask worker, each with its own random stream.
TRIALS_PER_BLOCK = 50
#: From this many trials the ``spread`` command runs them on a local Dask cluster.
LOCAL_CLUSTER_TRIALS = 20000


@dataclass(frozen=True)
class Tolerances:
    """Spread of each kind of part.

    Attributes
    ----------
    resistor : float
        Tolerance class as a fraction (0.01 = 1 %).
    is_factor : float
        IS spread: 3σ of ln(IS) is ln(1 + is_factor) (0.30 → ×/÷1.3).
    beta_factor : float
        BJT β spread, the same way (0.50 → ×/÷1.5).
    distribution : {"gauss", "uniform"}
        Resistor distribution: normal with 3σ = tolerance, or uniform on ±tolerance.
    """

    resistor: float = 0.01
    is_factor: float = 0.30
    beta_factor: float = 0.50
    distribution: str = "gauss"

    def check(self) -> Tolerances:
        if self.distribution not in DISTRIBUTIONS:
            raise ConfigError(f"unknown distribution; accepted: {', '.join(DISTRIBUTIONS)}",
                              key="tolerance.distribution", value=self.distribution)
        limit = 0.5 if self.distribution == "gauss" else 0.99
        if not (math.isfinite(self.resistor) and 0.0 <= self.resistor <= limit):
            raise ConfigError(f"resistor tolerance must be a fraction 0…{limit}",
                              key="tolerance.resistor", value=self.resistor)
        for k in ("is_factor", "beta_factor"):
            v = getattr(self, k)
            if not (math.isfinite(v) and 0.0 <= v <= 10.0):
                raise ConfigError("spread factor must be 0…10 (0.3 = ×/÷1.3 at 3σ)",
                                  key=f"tolerance.{k}", value=v)
        return self


@dataclass(frozen=True)
class Part:
    """One perturbable quantity: a resistor value, a junction's IS or a BJT's β."""

    channel: int
    stage: str
    element: str
    quantity: str  # "R", "IS" or "BF"

    @property
    def label(self) -> str:
        return f"{self.stage}.{self.element}" + ("" if self.quantity == "R"
                                                 else f" {self.quantity}")


class PartsModel(ChainModel):
    """A ChainModel whose netlists have their parts scaled.

    Parameters
    ----------
    spec : ChainSpec
    factors : dict, optional
        (channel, stage id, element name, quantity) → multiplier (missing = 1).
    """

    def __init__(self, spec: ChainSpec, factors: dict | None = None):
        super().__init__(spec)
        self.factors = dict(factors or {})

    def netlist(self, channel, stage, live=None):
        net = super().netlist(channel, stage, live)
        if not self.factors:
            return net
        for el in net.elements:
            if el.kind == "R":
                f = self.factors.get((channel, stage.id, el.name, "R"))
                if f is not None:
                    el.value = el.value * f
            elif el.kind in ("D", "Q"):
                ch = {}
                f = self.factors.get((channel, stage.id, el.name, "IS"))
                if f is not None:
                    ch["is_a"] = el.model.is_a * f
                f = self.factors.get((channel, stage.id, el.name, "BF"))
                if f is not None and el.kind == "Q":
                    ch["bf"] = el.model.bf * f
                if ch:
                    el.model = el.model.scaled(**ch)
        return net


def list_parts(spec: ChainSpec, *, live: dict | None = None) -> list[Part]:
    """Every perturbable part of every channel's stages, in a fixed order."""
    model = ChainModel(spec)
    out = []
    for ch in range(3):
        for st in model.stages_for(ch):
            for el in model.netlist(ch, st, live).elements:
                if el.kind == "R":
                    out.append(Part(ch, st.id, el.name, "R"))
                elif el.kind == "D":
                    out.append(Part(ch, st.id, el.name, "IS"))
                elif el.kind == "Q":
                    out.append(Part(ch, st.id, el.name, "IS"))
                    out.append(Part(ch, st.id, el.name, "BF"))
    return out


def draw_factors(parts: list[Part], tol: Tolerances, rng: np.random.Generator, *,
                 mismatch: bool = True) -> np.ndarray:
    """One trial's multipliers, in the order of *parts*.

    With ``mismatch=False`` the same draw serves a part on every channel.
    """
    keys = [(p.stage, p.element, p.quantity) for p in parts]
    if mismatch:
        index = np.arange(len(parts))
        n = len(parts)
    else:
        uniq = list(dict.fromkeys(keys))
        pos = {k: i for i, k in enumerate(uniq)}
        index = np.array([pos[k] for k in keys], dtype=np.int64)
        n = len(uniq)
        parts = [parts[keys.index(k)] for k in uniq]
    z = rng.standard_normal(n)
    u = rng.uniform(-1.0, 1.0, n)
    f = np.ones(n)
    for i, p in enumerate(parts):
        if p.quantity == "R":
            f[i] = 1.0 + (tol.resistor / 3.0 * z[i] if tol.distribution == "gauss"
                          else tol.resistor * u[i])
        elif p.quantity == "IS":
            f[i] = math.exp(math.log1p(tol.is_factor) / 3.0 * z[i])
        else:
            f[i] = math.exp(math.log1p(tol.beta_factor) / 3.0 * z[i])
    return f[index]


def _colour():
    """colour-science, without its notice about plotting support (not used here)."""
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    return colour


def grey_lab(rgb01: np.ndarray) -> np.ndarray:
    """CIELAB (D65) of R′G′B′ values shown on a BT.1886 (γ 2.4, black 0) BT.709 display."""
    colour = _colour()
    cs = colour.RGB_COLOURSPACES["ITU-R BT.709"]
    lin = np.clip(rgb01, 0.0, 1.0) ** 2.4  # ITU-R BT.1886 EOTF with L_B = 0, L_W = 1
    xyz = lin @ cs.matrix_RGB_to_XYZ.T
    return colour.XYZ_to_Lab(xyz, cs.whitepoint)


def delta_e00(lab_a: np.ndarray, lab_b: np.ndarray) -> np.ndarray:
    """CIEDE2000 colour difference (colour-science's implementation of CIE 142-2001)."""
    return np.asarray(_colour().delta_E(lab_a, lab_b, method="CIE 2000"))


@dataclass
class SpreadResult:
    """Numbers of a Monte Carlo run (see :func:`monte_carlo`).

    Attributes
    ----------
    vin : ndarray (N,)
        Sweep inputs, centred volts.
    nominal : ndarray (3, N)
        Nominal channel outputs, volts.
    curves : ndarray (trials, 3, N)
        Every trial's channel outputs, volts.
    ramp : ndarray (S,)
        Grey ramp R′G′B′ levels 0…1.
    ramp_rgb_nominal : ndarray (S, 3)
    delta_e : ndarray (trials, S)
        CIEDE2000 against the nominal output, per ramp step.
    cast : ndarray (trials, S)
        CIEDE2000 against the neutral grey of the same L*.
    cast_nominal : ndarray (S,)
        The nominal chain's own cast (per-channel overrides can give one).
    ranking : list of dict
    seed : int
    tolerances : Tolerances
    seconds : float
        Whole run (nominal, trials, ΔE, ranking).
    loop_seconds : float
        The trials alone.
    """

    vin: np.ndarray
    nominal: np.ndarray
    curves: np.ndarray
    ramp: np.ndarray
    ramp_rgb_nominal: np.ndarray
    delta_e: np.ndarray
    cast: np.ndarray
    cast_nominal: np.ndarray
    ranking: list
    seed: int
    tolerances: Tolerances
    mismatch: bool
    seconds: float = 0.0
    loop_seconds: float = 0.0
    parts: list = field(default_factory=list)

    @property
    def trials(self) -> int:
        return self.curves.shape[0]

    def channel_stats(self) -> np.ndarray:
        """(3, 4, N): min, max, std over trials and the nominal, volts."""
        c = self.curves
        return np.stack([c.min(axis=0), c.max(axis=0), c.std(axis=0),
                         self.nominal], axis=1)


def _run_model(model, spec, vin, ramp_v, *, t_kelvin, live):
    """(curves (3, N), ramp outputs (3, S)) of one model."""
    curves = np.empty((3, vin.size))
    ramp = np.empty((3, ramp_v.shape[1]))
    for c in range(3):
        v = np.concatenate([vin, ramp_v[c]])
        y = model.transfer(c, v, t_kelvin=t_kelvin, live=live) if model.stages_for(c) else v
        curves[c], ramp[c] = y[:vin.size], y[vin.size:]
    return curves, ramp


@dataclass(frozen=True)
class _BlockJob:
    """What every block of trials needs (sent once per block to a worker)."""

    spec: ChainSpec
    parts: list
    tol: Tolerances
    seed: int
    vin: np.ndarray
    ramp_v: np.ndarray
    t_kelvin: float
    live: dict
    mismatch: bool


def block_seed(seed: int, block: int) -> np.random.SeedSequence:
    """Random stream of trial block *block* of a run with *seed* (numpy SeedSequence)."""
    return np.random.SeedSequence(int(seed), spawn_key=(int(block),))


def trial_block(job: _BlockJob, block: int, n: int) -> tuple[int, np.ndarray, np.ndarray]:
    """Trials ``block·TRIALS_PER_BLOCK`` … ``+ n - 1``: (first trial, curves, ramp R′G′B′)."""
    rng = np.random.default_rng(block_seed(job.seed, block))
    model = PartsModel(job.spec)
    keys = [(p.channel, p.stage, p.element, p.quantity) for p in job.parts]
    std = job.spec.standard_or_default
    curves = np.empty((n, 3, job.vin.size))
    ramp_rgb = np.empty((n, job.ramp_v.shape[1], 3))
    for k in range(n):
        f = draw_factors(job.parts, job.tol, rng, mismatch=job.mismatch)
        model.factors = dict(zip(keys, f, strict=True))
        curves[k], rv = _run_model(model, job.spec, job.vin, job.ramp_v,
                                   t_kelvin=job.t_kelvin, live=job.live)
        ramp_rgb[k] = volts_to_rgb01(rv, job.spec, standard=std)
    return block * TRIALS_PER_BLOCK, curves, ramp_rgb


def _run_blocks(job: _BlockJob, trials: int, scheduler):
    """Yield (first trial, curves, ramp) of every block, here or on Dask, in any order."""
    blocks = [(b, min(TRIALS_PER_BLOCK, trials - b * TRIALS_PER_BLOCK))
              for b in range(-(-trials // TRIALS_PER_BLOCK))]
    if scheduler is None:
        for b, n in blocks:
            yield trial_block(job, b, n)
        return
    from livecurve.outputs.cluster import dask_client
    if hasattr(scheduler, "submit"):
        yield from _on_client(scheduler, job, blocks)
        return
    with dask_client(None if scheduler == "local" else scheduler,
                     tasks=len(blocks)) as client:
        yield from _on_client(client, job, blocks)


def _on_client(client, job: _BlockJob, blocks):
    from distributed import as_completed
    shared = client.scatter(job, broadcast=True)
    futures = [client.submit(trial_block, shared, b, n, pure=False) for b, n in blocks]
    for fut in as_completed(futures, loop=client.loop):
        yield fut.result()
        fut.release()


def _cast(lab: np.ndarray) -> np.ndarray:
    grey = np.zeros_like(lab)
    grey[..., 0] = lab[..., 0]
    return delta_e00(lab, grey)


def sensitivity(spec: ChainSpec, parts: list[Part], tol: Tolerances, *, vin: np.ndarray,
                t_kelvin: float, live: dict, nominal: np.ndarray | None = None) -> list[dict]:
    """One-at-a-time ranking of *parts* (see the module docstring), largest effect first.

    Returns
    -------
    list of dict
        ``part``, ``quantity``, ``channels``, ``low_factor``, ``high_factor``,
        ``delta_low_mv``, ``delta_high_mv``, ``effect_mv``.
    """
    model = PartsModel(spec)
    if nominal is None:
        nominal = np.stack([model.transfer(c, vin, t_kelvin=t_kelvin, live=live)
                            if model.stages_for(c) else vin for c in range(3)])
    limits = {"R": (1.0 - tol.resistor, 1.0 + tol.resistor),
              "IS": (1.0 / (1.0 + tol.is_factor), 1.0 + tol.is_factor),
              "BF": (1.0 / (1.0 + tol.beta_factor), 1.0 + tol.beta_factor)}
    rows: dict = {}
    for p in parts:
        lo, hi = limits[p.quantity]
        d = []
        for f in (lo, hi):
            model.factors = {(p.channel, p.stage, p.element, p.quantity): f}
            y = model.transfer(p.channel, vin, t_kelvin=t_kelvin, live=live)
            d.append(float(np.abs(y - nominal[p.channel]).max()) * 1e3)
        key = (p.stage, p.element, p.quantity)
        row = rows.setdefault(key, {"part": f"{p.stage}.{p.element}", "quantity": p.quantity,
                                    "channels": [], "low_factor": lo, "high_factor": hi,
                                    "delta_low_mv": 0.0, "delta_high_mv": 0.0})
        row["channels"].append(p.channel)
        row["delta_low_mv"] = max(row["delta_low_mv"], d[0])
        row["delta_high_mv"] = max(row["delta_high_mv"], d[1])
    out = list(rows.values())
    for r in out:
        r["effect_mv"] = max(r["delta_low_mv"], r["delta_high_mv"])
    out.sort(key=lambda r: (-r["effect_mv"], r["part"], r["quantity"]))
    return out


def monte_carlo(spec: ChainSpec, *, trials: int, seed: int | None = None,
                tolerances: Tolerances | None = None, points: int = 101,
                ramp_steps: int = 21, t_kelvin: float | None = None, live: dict | None = None,
                mismatch: bool = True, progress: bool = False,
                rank: bool = True, scheduler=None) -> SpreadResult:
    """Monte Carlo over part tolerances.

    Parameters
    ----------
    spec : ChainSpec
    trials : int
        Number of boards (sets of three channels) to draw, 1…1 000 000.
    seed : int, optional
        Random seed (numpy PCG64); the same seed gives the same result.  Default: a fresh
        seed, recorded in the result.
    tolerances : Tolerances, optional
    points : int
        Sweep points over the chain's sweep range.
    ramp_steps : int
        Grey levels from 0 to 1 for the colour-cast figures.
    t_kelvin : float, optional
        Junction temperature (default the chain's ambient).
    live : dict, optional
        Knob values (default their starting values).
    mismatch : bool
        Draw each channel's parts independently (default) or once for all channels.
    progress : bool
        Progress bar on stderr.
    rank : bool
        Also run the one-at-a-time sensitivity ranking.
    scheduler : None, "local", str or distributed.Client
        Where the trials run, in blocks of :data:`TRIALS_PER_BLOCK`: in this process
        (None), on a local Dask cluster started for the run (``"local"``), on the scheduler
        at an address (``tcp://HOST:PORT``) or through a connected client.  Block *b* draws
        from its own stream, ``SeedSequence(seed, spawn_key=(b,))``, so the result is the
        same wherever and on however many workers the blocks run.

    Returns
    -------
    SpreadResult
    """
    t_start = time.perf_counter()
    if isinstance(trials, bool) or not isinstance(trials, (int, np.integer)) \
            or not 1 <= trials <= MAX_TRIALS:
        raise ConfigError(f"number of trials must be a whole number 1…{MAX_TRIALS}",
                          key="--trials", value=trials)
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % (2 ** 63))
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ConfigError("seed must be a whole number ≥ 0", key="--seed", value=seed)
    for k, v, lo in (("points", points, 2), ("ramp_steps", ramp_steps, 2)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not lo <= v <= 100001:
            raise ConfigError(f"must be a whole number {lo}…100001", key=k, value=v)
    tol = (tolerances or Tolerances()).check()
    t = check_temperature(spec, t_kelvin)
    lv = check_live(spec, live)
    std = spec.standard_or_default
    vin = np.linspace(*spec.sweep_v, points)
    ramp = np.linspace(0.0, 1.0, ramp_steps)
    ramp_v = rgb01_to_volts(np.repeat(ramp[:, None], 3, axis=1), spec, standard=std)
    parts = list_parts(spec, live=lv)
    model = PartsModel(spec)
    nominal, ramp_nom_v = _run_model(model, spec, vin, ramp_v, t_kelvin=t, live=lv)
    rgb_nom = volts_to_rgb01(ramp_nom_v, spec, standard=std)
    curves = np.empty((trials, 3, points))
    ramp_rgb = np.empty((trials, ramp_steps, 3))
    bar = Progress(trials, enabled=progress, desc="spread", unit="trial")
    done = 0
    t_loop = time.perf_counter()
    job = _BlockJob(spec, parts, tol, int(seed), vin, ramp_v, t, lv, mismatch)
    for lo, c, r in _run_blocks(job, trials, scheduler):
        curves[lo:lo + c.shape[0]], ramp_rgb[lo:lo + c.shape[0]] = c, r
        done += c.shape[0]
        bar.update(done)
    loop_s = time.perf_counter() - t_loop
    bar.close()
    lab_nom = grey_lab(rgb_nom)
    lab = grey_lab(ramp_rgb)
    de = delta_e00(lab, np.broadcast_to(lab_nom, lab.shape))
    cast = _cast(lab)
    ranking = sensitivity(spec, parts, tol, vin=vin, t_kelvin=t, live=lv,
                          nominal=nominal) if rank else []
    return SpreadResult(vin, nominal, curves, ramp, rgb_nom, de, cast, _cast(lab_nom), ranking,
                        int(seed), tol, mismatch, time.perf_counter() - t_start, loop_s, parts)


# ---------------------------------------------------------------------------- outputs
def spread_csv_text(res: SpreadResult) -> str:
    """CSV: ``input_v`` then per channel ``nomK_v,minK_v,maxK_v,stdK_v`` (K = 0, 1, 2)."""
    st = res.channel_stats()
    cols = [res.vin]
    head = ["input_v"]
    for c in range(3):
        head += [f"nom{c}_v", f"min{c}_v", f"max{c}_v", f"std{c}_v"]
        cols += [st[c, 3], st[c, 0], st[c, 1], st[c, 2]]
    rows = np.column_stack(cols)
    lines = [",".join(head)] + [",".join(f"{x:.9g}" for x in r) for r in rows]
    return "\n".join(lines) + "\n"


def spread_summary(res: SpreadResult, spec: ChainSpec) -> dict:
    """Everything a report needs, JSON-ready (volts in mV, ΔE as CIEDE2000)."""
    st = res.channel_stats()
    names = channel_names(spec.space)
    chans = []
    for c in range(3):
        band = (st[c, 1] - st[c, 0]) * 1e3
        chans.append({"channel": c, "name": names[c],
                      "stages": [s.id for s in ChainModel(spec).stages_for(c)],
                      "band_max_mv": float(band.max()),
                      "std_max_mv": float(st[c, 2].max() * 1e3),
                      "std_mean_mv": float(st[c, 2].mean() * 1e3),
                      "dev_min_mv": float(((st[c, 0] - st[c, 3]) * 1e3).min()),
                      "dev_max_mv": float(((st[c, 1] - st[c, 3]) * 1e3).max())})
    worst_de = res.delta_e.max(axis=1)
    worst_cast = res.cast.max(axis=1)

    def dist(a):
        return {"median": float(np.median(a)), "p95": float(np.percentile(a, 95)),
                "max": float(a.max()), "mean": float(a.mean())}

    return {
        "chain": spec.title, "path": spec.path, "trials": res.trials, "seed": res.seed,
        "tolerances": asdict(res.tolerances), "mismatch": res.mismatch,
        "sweep_v": [float(res.vin[0]), float(res.vin[-1]), int(res.vin.size)],
        "channels": chans,
        "grey_ramp": {
            "steps": res.ramp.tolist(),
            "display": "BT.1886 EOTF (gamma 2.4, black 0), BT.709 primaries, D65; CIEDE2000",
            "delta_e_worst_per_trial": dist(worst_de),
            "cast_worst_per_trial": dist(worst_cast),
            "cast_nominal_max": float(res.cast_nominal.max()),
            "delta_e_by_step_p95": np.percentile(res.delta_e, 95, axis=0).tolist(),
            "cast_by_step_p95": np.percentile(res.cast, 95, axis=0).tolist(),
        },
        "ranking": res.ranking,
        "seconds": res.seconds,
        "ms_per_trial": 1e3 * res.loop_seconds / res.trials,
    }


def spread_figure(res: SpreadResult, spec: ChainSpec, *, top: int = 12,
                  t_kelvin: float | None = None, live: dict | None = None):
    """Per channel, the band of output − nominal over the trials (min … max shaded, ±1σ
    lines, mV, each panel on its own axes), and the sensitivity ranking as horizontal bars
    (mV).  Returns a matplotlib Figure."""
    from livecurve.outputs.plots import NEUTRAL, chain_title, channel_style, new_figure
    st = res.channel_stats()
    names = channel_names(spec.space)
    rows = res.ranking[:top]
    fig, axes = new_figure(960, 1000, nrows=4, gridspec_kw={
        "height_ratios": [1, 1, 1, max(1.0, 0.12 * len(rows) + 0.4)]})
    for c in range(3):
        ax = axes[c]
        nom = st[c, 3]
        lo, hi, sd = (st[c, 0] - nom) * 1e3, (st[c, 1] - nom) * 1e3, st[c, 2] * 1e3
        sty = channel_style(c)
        ax.fill_between(res.vin, lo, hi, color=sty["color"], alpha=0.25,
                        label=f"min … max of {res.trials} trials")
        ax.plot(res.vin, sd, color=sty["color"], linestyle="--", linewidth=1.2,
                label="+1σ")
        ax.plot(res.vin, -sd, color=sty["color"], linestyle=":", linewidth=1.2,
                label="−1σ")
        ax.axhline(0.0, color=NEUTRAL, linewidth=0.8)
        ax.set_title(f"channel {c} ({names[c]}): output − nominal", fontsize="small")
        ax.set_xlabel("input [V]")
        ax.set_ylabel("deviation [mV]")
        ax.grid(True, alpha=0.35)
        ax.legend(loc="best", fontsize="x-small")
    ax = axes[3]
    hatches = {"R": "", "IS": "//", "BF": ".."}
    qcol = {"R": "#1f8a8a", "IS": "#d9822b", "BF": "#7a4fc2"}
    if rows:
        labels = [r["part"] + ("" if r["quantity"] == "R" else f" {r['quantity']}")
                  for r in rows]
        y = np.arange(len(rows))[::-1]
        bars = ax.barh(y, [r["effect_mv"] for r in rows],
                       color=[qcol[r["quantity"]] for r in rows])
        for bar, r in zip(bars, rows, strict=True):
            bar.set_hatch(hatches[r["quantity"]])
        ax.set_yticks(y, labels, fontsize="small")
        from matplotlib.patches import Patch
        seen = list(dict.fromkeys(r["quantity"] for r in rows))
        what = {"R": "resistor", "IS": "junction IS", "BF": "BJT β"}
        ax.legend(handles=[Patch(facecolor=qcol[q], hatch=hatches[q], label=what[q])
                           for q in seen], loc="lower right", fontsize="x-small")
    else:
        ax.text(0.5, 0.5, "no parts to rank", ha="center", va="center",
                transform=ax.transAxes)
        ax.set_yticks([])
    ax.set_xlabel("largest output change over the sweep [mV]")
    ax.set_title("one part at its tolerance limit, everything else nominal",
                 fontsize="small")
    ax.grid(True, axis="x", alpha=0.35)
    tol = res.tolerances
    fig.suptitle(chain_title(spec, f"component spread, {res.trials} trials (seed "
                             f"{res.seed}), resistors {100 * tol.resistor:g} % "
                             f"{tol.distribution}", t_kelvin=t_kelvin, live=live),
                 fontsize="medium")
    return fig


@dataclass
class SpreadReport:
    """What :func:`run_spread` did: the summary and the files written."""

    summary: dict
    written: list

    def lines(self) -> list[str]:
        s = self.summary
        tol = s["tolerances"]
        out = [f"{s['chain']}: {s['trials']} trials (seed {s['seed']}), resistors "
               f"{100 * tol['resistor']:g} % {tol['distribution']}, IS ×/÷{1 + tol['is_factor']:g}"
               f", β ×/÷{1 + tol['beta_factor']:g} at 3σ; {s['ms_per_trial']:.1f} ms/trial"]
        for c in s["channels"]:
            if not c["stages"]:
                out.append(f"  channel {c['channel']} ({c['name']}): passes straight through")
                continue
            out.append(f"  channel {c['channel']} ({c['name']}): spread up to "
                       f"{c['band_max_mv']:.2f} mV wide (σ up to {c['std_max_mv']:.2f} mV)")
        g = s["grey_ramp"]
        de = g["delta_e_worst_per_trial"]
        out.append(f"  grey ramp: worst ΔE00 per board median {de['median']:.2f}"
                   f", 95 % {de['p95']:.2f}; colour cast ΔE00 median "
                   f"{g['cast_worst_per_trial']['median']:.2f}, 95 % "
                   f"{g['cast_worst_per_trial']['p95']:.2f} (nominal {g['cast_nominal_max']:.2f})")
        for r in s["ranking"][:5]:
            q = "" if r["quantity"] == "R" else f" {r['quantity']}"
            out.append(f"    {r['part']}{q}: {r['effect_mv']:.3g} mV")
        out += [f"  wrote {p}" for p in self.written]
        return out


def run_spread(spec: ChainSpec, *, trials: int, seed: int | None = None, csv=None, json=None,
               png=None, progress: bool = True, tolerances: Tolerances | None = None,
               points: int = 101, ramp_steps: int = 21, t_kelvin: float | None = None,
               live: dict | None = None, mismatch: bool = True,
               force: bool = True, scheduler=None) -> SpreadReport:
    """``livecurve spread``: Monte Carlo, then the CSV, JSON and PNG asked for.

    Outputs
    -------
    csv
        ``input_v,nom0_v,min0_v,max0_v,std0_v,…`` one row per sweep point (volts).
    json
        :func:`spread_summary`: settings, per-channel spread (mV), ΔE00 and cast figures of
        the grey ramp, the sensitivity ranking.
    png
        Figure (PNG, SVG or PDF by extension): per-channel bands (min/max/±σ of output −
        nominal, mV) and the ranking bars.

    Returns
    -------
    SpreadReport
        ``lines()`` gives the text the command line prints.
    """
    from livecurve.media.atomic import atomic_output, check_target
    from livecurve.outputs.plots import save_figure
    for p in (csv, json, png):
        if p is not None:
            check_target(p, force=force)
    res = monte_carlo(spec, trials=trials, seed=seed, tolerances=tolerances, points=points,
                      ramp_steps=ramp_steps, t_kelvin=t_kelvin, live=live, mismatch=mismatch,
                      progress=progress, scheduler=scheduler)
    summary = spread_summary(res, spec)
    written = []
    if csv is not None:
        with atomic_output(csv, force=force) as tmp:
            tmp.write_text(spread_csv_text(res))
        written.append(str(csv))
    if json is not None:
        with atomic_output(json, force=force) as tmp:
            tmp.write_text(_json.dumps(summary, indent=1) + "\n")
        written.append(str(json))
    if png is not None:
        save_figure(png, spread_figure(res, spec, t_kelvin=t_kelvin, live=live), force=force)
        written.append(str(png))
    return SpreadReport(summary, written)
