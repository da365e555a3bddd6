"""``livecurve batch``: every source through every chain at every setting, on Dask.

A batch is a grid: sources × chains × knob settings (``--set NAME=V1,V2``, the product of
all of them) × junction temperatures (``--temp-c``).  Each combination is an *item* with one
output file in the output folder.  The work runs on Dask's ``distributed`` scheduler: a
local cluster in this process by default (one worker process per core, one thread each),
or an existing cluster given by address (``--scheduler`` or ``LIVECURVE_SCHEDULER``).

Output names
------------
``SOURCE__CHAIN[__KNOB-VALUE…][__tTEMPC].EXT`` where SOURCE and CHAIN are the file stems,
KNOB-VALUE each ``--set`` knob with its value as written, and ``tTEMPC`` the temperature in
°C (``t40C``).  Every character outside ``A-Z a-z 0-9 . _ + -`` becomes ``_``, and a leading
``.`` or ``-`` too, so the name is safe on any file system and never hidden.  When two items
would share a name (two sources with the same stem in different folders), or a name would
pass 150 characters, it is shortened where needed and followed by ``_`` and the first 8 hex
digits of the SHA-1 of the item's full description.  EXT is ``.png`` (16-bit) for stills,
``.mkv`` for ``--codec ffv1`` and ``.mp4`` for ``h264`` (the default).

Resuming and atomic items
-------------------------
Outputs appear only complete (:mod:`livecurve.media.atomic`), so an output that exists is
finished: a rerun skips it (status ``present``) and, when every output exists, starts no
cluster at all.  ``--force`` renders everything again.  An item that fails is written into
the index with its error while the others carry on.  A worker process that dies loses its
tasks to the scheduler, which runs them again elsewhere; temporary files it left are removed
when the batch ends.

Long clips
----------
Clips longer than one segment (``--segment-s``, default 30 s) are cut into segments that
render in parallel and are joined without re-encoding (:mod:`livecurve.outputs.segments`).

The index and the contact sheet
-------------------------------
``index.csv`` (RFC 4180 quoting) has one row per item: ``source, chain, settings, temp_c,
output, status, seconds, frames, segments, worker, flash, error``.  ``flash`` is the
photosensitive-flash estimate of a clip rendered whole with a control bound (ITU-R BT.1702
estimate, as ``render`` prints it); split clips and stills leave it empty.  ``worker`` is
the address of the Dask worker(s) that made the output.  ``contact_sheet.png`` shows one
frame of every item (the middle frame of a clip) with its output name.
"""

from __future__ import annotations

import dataclasses
import hashlib
import itertools
import math
import os
import re
import shutil
import time
from pathlib import Path

from livecurve.errors import ConfigError, LivecurveError, MediaError

#: Columns of ``index.csv``.
INDEX_COLUMNS = ("source", "chain", "settings", "temp_c", "output", "status", "seconds",
                 "frames", "segments", "worker", "flash", "error")
#: Hidden folder (inside the output folder) where segments are rendered before the join.
WORK_DIR = ".livecurve-segments"
MAX_NAME = 150

_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]")


@dataclasses.dataclass(frozen=True)
class Item:
    """One combination of the grid and where its output goes.

    Attributes
    ----------
    source, chain : str
        The paths as given.
    settings : tuple of (name, text, value)
        Knob settings: name, value as written, value in SI units.
    temp_text : str or None
        ``--temp-c`` value as written.
    t_kelvin : float or None
    output : str
        File name inside the output folder.
    kind : {"clip", "still"}
    fps : float
    first, stop : int
        Frames ``[first, stop)`` of the source (clips; ``0, 1`` for a still).
    segments : tuple of (int, int)
        Frame windows rendered separately and joined (empty: rendered whole).
    """

    source: str
    chain: str
    settings: tuple
    temp_text: str | None
    t_kelvin: float | None
    output: str
    kind: str
    fps: float
    first: int
    stop: int
    segments: tuple = ()

    @property
    def frames(self) -> int:
        return self.stop - self.first

    @property
    def settings_text(self) -> str:
        return " ".join(f"{n}={t}" for n, t, _v in self.settings)


# ---------------------------------------------------------------------------- the grid
def parse_grid_option(text: str, *, key: str) -> tuple[str, list[str]]:
    """``NAME=V1,V2,…`` → (NAME, [V1, V2, …])."""
    if "=" not in text:
        raise ConfigError("expected NAME=V1,V2,...", key=key, value=text)
    name, vals = text.split("=", 1)
    values = [v.strip() for v in vals.split(",")]
    if not name.strip() or not values or any(not v for v in values):
        raise ConfigError("expected NAME=V1,V2,... with no empty value", key=key, value=text)
    return name.strip(), values


def safe_part(text: str) -> str:
    """*text* with every character outside ``A-Za-z0-9._+-`` replaced by ``_``."""
    s = _UNSAFE.sub("_", text)
    return ("_" + s[1:]) if s[:1] in (".", "-") else s


def item_name(source: str, chain: str, settings, temp_c: float | None) -> str:
    """Output stem of one item (see the module docstring), before collision handling."""
    parts = [Path(source).stem or "source", Path(chain).stem or "chain"]
    parts += [f"{n}-{t}" for n, t, _v in settings]
    if temp_c is not None:
        parts.append(f"t{temp_c:g}C")
    return safe_part("__".join(parts))


def _hashed(stem: str, key: str) -> str:
    h = hashlib.sha1(key.encode("utf-8", "surrogatepass")).hexdigest()[:8]
    return f"{stem[:MAX_NAME - 9]}_{h}"


def _settings_for(spec, chain_path: str, sets) -> list[tuple]:
    """Each knob's values checked against *spec*: [[(name, text, value), …], …] per knob."""
    from livecurve.units import parse_value
    out = []
    for name, texts in sets:
        if name not in spec.live:
            raise ConfigError(f"no live parameter '{name}' in this chain; live: "
                              f"{', '.join(spec.live) or 'none'}", path=chain_path,
                              key="--set", value=name)
        ls = spec.live[name]
        vals = []
        for t in texts:
            v = parse_value(t, ls.unit, key=f"--set {name}", path=chain_path)
            if not ls.lo <= v <= ls.hi:
                raise ConfigError(f"outside {ls.lo:g} … {ls.hi:g}", path=chain_path,
                                  key=f"--set {name}", value=t)
            vals.append((name, t, v))
        out.append(vals)
    return out


def apply_settings(spec, settings):
    """*spec* with each knob's starting value replaced by the setting (a new spec)."""
    if not settings:
        return spec
    live = dict(spec.live)
    for name, _t, v in settings:
        live[name] = dataclasses.replace(live[name], value=v)
    return dataclasses.replace(spec, live=live)


def plan_batch(chains, sources, *, sets=(), temps=(), codec: str = "h264",
               segment_s: float | None = None) -> tuple[list[Item], dict]:
    """Expand the grid into items.

    Parameters
    ----------
    chains, sources : list of str
    sets : list of str
        ``NAME=V1,V2,…`` options; every chain must have the knob.
    temps : list of str
        Temperatures (``40``, ``40C``, ``313K``); empty = each chain's ambient.
    codec : {"h264", "ffv1"}
    segment_s : float, optional
        Segment length in seconds of source time (default
        :data:`~livecurve.outputs.segments.DEFAULT_SEGMENT_S`).

    Returns
    -------
    (list of Item, dict)
        The items in grid order and the loaded chain specs by path.
    """
    from livecurve.config.chainfile import load_chain
    from livecurve.media.probe import probe
    from livecurve.outputs.segments import DEFAULT_SEGMENT_S, plan_segments, segment_frames_for
    from livecurve.units import parse_temperature_k
    if not chains:
        raise ConfigError("give at least one --chain", key="--chain", value="")
    if not sources:
        raise ConfigError("give at least one --source", key="--source", value="")
    if codec not in ("h264", "ffv1"):
        raise ConfigError("codec must be h264 or ffv1", key="--codec", value=codec)
    seg_s = DEFAULT_SEGMENT_S if segment_s is None else segment_s
    if not (isinstance(seg_s, (int, float)) and math.isfinite(seg_s) and seg_s > 0):
        raise ConfigError("must be a positive number of seconds", key="--segment-s",
                          value=segment_s)
    grid_sets = [parse_grid_option(s, key="--set") for s in sets]
    names = [n for n, _ in grid_sets]
    if len(set(names)) != len(names):
        raise ConfigError("a knob is given twice", key="--set",
                          value=next(n for n in names if names.count(n) > 1))
    temp_list = []
    for t in temps:
        for part in str(t).split(","):
            if not part.strip():
                raise ConfigError("empty temperature", key="--temp-c", value=t)
            temp_list.append((part.strip(), parse_temperature_k(part.strip(), key="--temp-c")))
    specs = {c: load_chain(c) for c in dict.fromkeys(map(str, chains))}
    infos = {}
    for s in dict.fromkeys(map(str, sources)):
        if s.startswith("camera:"):
            raise ConfigError("a batch renders files; a camera has no end", key="--source",
                              value=s)
        infos[s] = probe(s)
    ext_clip = ".mkv" if codec == "ffv1" else ".mp4"
    items = []
    for src, info in infos.items():
        kind = "still" if info.kind == "still" else "clip"
        if kind == "clip" and info.n_frames is None:
            raise MediaError(f"{src}: its number of frames is unknown; a batch needs it")
        stop = 1 if kind == "still" else info.n_frames
        segs = ()
        if kind == "clip" and info.kind == "clip":
            windows = plan_segments(0, stop, segment_frames=segment_frames_for(seg_s, info.fps))
            segs = tuple(windows) if len(windows) > 1 else ()
        for ch, spec in specs.items():
            for combo in itertools.product(*_settings_for(spec, ch, grid_sets)):
                for t_text, t_k in (temp_list or [(None, None)]):
                    t_c = None if t_k is None else round(t_k - 273.15, 6)
                    items.append(Item(src, ch, tuple(combo), t_text, t_k,
                                      item_name(src, ch, combo, t_c), kind, info.fps, 0, stop,
                                      segs))
    return _unique_names(items, ext_clip), specs


def _unique_names(items: list[Item], ext_clip: str) -> list[Item]:
    stems = [it.output for it in items]
    out = []
    for it, stem in zip(items, stems, strict=True):
        if stems.count(stem) > 1 or len(stem) > MAX_NAME:
            key = "\0".join([os.path.abspath(it.source), os.path.abspath(it.chain),
                             it.settings_text, it.temp_text or ""])
            stem = _hashed(stem, key)
        ext = ".png" if it.kind == "still" else ext_clip
        out.append(dataclasses.replace(it, output=stem + ext))
    return out


# ---------------------------------------------------------------------------- worker tasks
def _worker_address() -> str:
    try:
        from distributed import get_worker
        return get_worker().address
    except (ImportError, ValueError):
        return "local"


def _error_text(exc: BaseException) -> str:
    msg = str(exc) if isinstance(exc, LivecurveError) else f"{type(exc).__name__}: {exc}"
    return " ".join(msg.split())  # one line in the index


def render_item(item: Item, spec, out_dir: str, *, codec: str, force: bool) -> dict:
    """Render one whole item into the output folder (a Dask task).

    Returns
    -------
    dict
        ``status`` (``done``, ``present`` or ``failed``), ``seconds``, ``frames``,
        ``worker``, ``error``.
    """
    from livecurve.outputs.render import render
    t0 = time.perf_counter()
    worker = _worker_address()
    final = Path(out_dir) / item.output
    if final.exists() and not force:
        # a rerun of this task after its first result was lost (its worker died)
        return {"status": "present", "seconds": 0.0, "frames": item.frames,
                "worker": "", "error": ""}
    try:
        rep = render(apply_settings(spec, item.settings), item.source, final,
                     codec=None if item.kind == "still" else codec, force=force,
                     progress=False, t_kelvin=item.t_kelvin)
        frames, err, status, flash = rep.frames, "", "done", rep.flash or ""
    except Exception as exc:  # one item's failure must not stop the batch
        frames, err, status, flash = 0, _error_text(exc), "failed", ""
    return {"status": status, "seconds": time.perf_counter() - t0, "frames": frames,
            "worker": worker, "error": err, "flash": flash}


def render_piece(item: Item, spec, k: int, work: str, *, codec: str) -> dict:
    """Render segment *k* of a split item into the work folder (a Dask task)."""
    from livecurve.outputs.segments import render_segment
    t0 = time.perf_counter()
    i0, i1 = item.segments[k]
    path = Path(work) / f"seg_{k:05d}{Path(item.output).suffix}"
    try:
        render_segment(apply_settings(spec, item.settings), item.source, path, i0, i1,
                       fps=item.fps, codec=codec, t_kelvin=item.t_kelvin)
        err = ""
    except Exception as exc:  # reported by the join
        err = _error_text(exc)
    return {"path": str(path), "frames": i1 - i0, "seconds": time.perf_counter() - t0,
            "worker": _worker_address(), "error": err}


def join_item(item: Item, pieces: list[dict], out_dir: str, *, force: bool) -> dict:
    """Join the segments of a split item into its output (a Dask task)."""
    from livecurve.media.probe import probe
    from livecurve.outputs.segments import join_segments
    t0 = time.perf_counter()
    final = Path(out_dir) / item.output
    workers = " ".join(dict.fromkeys([p["worker"] for p in pieces] + [_worker_address()]))
    seconds = sum(p["seconds"] for p in pieces)
    bad = [p["error"] for p in pieces if p["error"]]
    if bad:
        return {"status": "failed", "seconds": seconds, "frames": 0, "worker": workers,
                "error": bad[0]}
    if final.exists() and not force:
        return {"status": "present", "seconds": 0.0, "frames": item.frames, "worker": "",
                "error": ""}
    try:
        info = probe(item.source)
        start_s, dur_s = item.first / item.fps, item.frames / item.fps
        join_segments([(p["path"], p["frames"]) for p in pieces], final, fps=item.fps,
                      audio_from=item.source if info.has_audio else None,
                      audio_start_s=start_s,
                      audio_duration_s=None if item.stop >= (info.n_frames or 0) else dur_s,
                      force=force)
        status, err, frames = "done", "", item.frames
    except Exception as exc:  # one item's failure must not stop the batch
        status, err, frames = "failed", _error_text(exc), 0
    finally:
        shutil.rmtree(Path(pieces[0]["path"]).parent, ignore_errors=True)
    return {"status": status, "seconds": seconds + time.perf_counter() - t0, "frames": frames,
            "worker": workers, "error": err}
