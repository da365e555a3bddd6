"""Running a planned batch on Dask: futures, progress, ``index.csv`` and the contact sheet.

See :mod:`livecurve.outputs.batch` for the grid, the output names and the tasks.  Progress
counts items and frames as the futures finish (a split clip counts its frames segment by
segment): a one-line bar on a terminal, a plain line per finished piece of work otherwise.
"""

from __future__ import annotations

import csv
import io
import math
import os
import secrets
import shutil
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from livecurve.errors import OutputError
from livecurve.outputs.batch import (
    INDEX_COLUMNS,
    WORK_DIR,
    Item,
    join_item,
    render_item,
    render_piece,
)

INDEX_NAME = "index.csv"
SHEET_NAME = "contact_sheet.png"
#: Width of one contact-sheet picture, pixels.
THUMB_W = 192


class BatchProgress:
    """Items and frames done, on stderr."""

    def __init__(self, items: int, frames: int, *, enabled: bool = True, stream=None):
        self.items, self.frames, self.enabled = items, frames, enabled
        self.stream = stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.t0 = time.perf_counter()
        self.last = 0.0

    def update(self, items_done: int, frames_done: int, failed: int, *,
               force: bool = False) -> None:
        if not self.enabled:
            return
        now = time.perf_counter()
        text = (f"batch: {items_done}/{self.items} items, {frames_done}/{self.frames} frames"
                + (f", {failed} failed" if failed else "") + f", {now - self.t0:.0f} s")
        if self.tty:
            if not force and now - self.last < 0.25:
                return
            self.stream.write("\r" + text + " ")
        else:
            self.stream.write(text + "\n")
        self.last = now
        self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.tty:
            self.stream.write("\n")
            self.stream.flush()


@dataclass
class BatchReport:
    """Rows of the index (dicts keyed by :data:`INDEX_COLUMNS`) and the files written."""

    rows: list
    index: str
    sheet: str | None
    submitted: int

    @property
    def failed(self) -> int:
        return sum(r["status"] == "failed" for r in self.rows)

    def lines(self) -> list[str]:
        count = {s: sum(r["status"] == s for r in self.rows) for s in ("done", "present",
                                                                       "failed")}
        out = [f"batch: {len(self.rows)} items: {count['done']} rendered, "
               f"{count['present']} already present, {count['failed']} failed"]
        out += [f"  failed {r['output']}: {r['error']}" for r in self.rows
                if r["status"] == "failed"]
        out += [f"  {r['output']}: {r['flash']}" for r in self.rows
                if r.get("flash") and not r["flash"].startswith("flash check: ok")]
        out.append(f"  wrote {self.index}")
        if self.sheet:
            out.append(f"  wrote {self.sheet}")
        return out


def run_batch(items: list[Item], specs: dict, out_dir, *, codec: str = "h264",
              force: bool = False, scheduler: str | None = None, progress: bool = True,
              n_workers: int | None = None, stream=None) -> BatchReport:
    """Render every item not yet present, then write the index and the contact sheet.

    Parameters
    ----------
    items, specs
        From :func:`livecurve.outputs.batch.plan_batch`.
    out_dir : str or os.PathLike
        Output folder (created); must be a path every worker sees.
    scheduler : str, optional
        Address of an existing Dask scheduler; None starts a local cluster when there is
        work to do.
    n_workers : int, optional
        Local cluster size (default: one per core).
    """
    from livecurve.outputs.cluster import dask_client
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{out}: cannot create the output folder: {exc.strerror}") from exc
    if not out.is_dir():
        raise OutputError(f"{out}: is not a folder")
    if not os.access(out, os.W_OK | os.X_OK):
        raise OutputError(f"{out}: the output folder is not writable")
    old = read_index(out / INDEX_NAME)
    results: dict[int, dict] = {}
    todo = []
    for i, it in enumerate(items):
        if (out / it.output).exists() and not force:
            prev = old.get(it.output, {})
            results[i] = {"status": "present", "seconds": prev.get("seconds", ""),
                          "frames": prev.get("frames", it.frames),
                          "worker": prev.get("worker", ""), "flash": prev.get("flash", ""),
                          "error": ""}
        else:
            todo.append(i)
    total_frames = sum(items[i].frames for i in todo)
    bar = BatchProgress(len(todo), total_frames, enabled=progress, stream=stream)
    try:
        if todo:
            n_tasks = sum(max(1, len(items[i].segments)) for i in todo)
            with dask_client(scheduler, n_workers=n_workers, tasks=n_tasks) as client:
                _run(client, items, specs, todo, out, codec, force, results, bar)
    finally:
        bar.close()
        _sweep(out, items)
    rows = [_row(it, results.get(i)) for i, it in enumerate(items)]
    index = write_index(out / INDEX_NAME, rows)
    sheet = write_contact_sheet(out / SHEET_NAME, out, items, rows)
    return BatchReport(rows, str(index), str(sheet) if sheet else None, len(todo))


def _run(client, items, specs, todo, out: Path, codec, force, results, bar) -> None:
    from distributed import as_completed
    token = secrets.token_hex(4)
    kind: dict = {}  # future key → ("item", i) or ("piece", i)
    futures = []
    for i in todo:
        it = items[i]
        spec = specs[it.chain]
        if it.segments:
            work = out / WORK_DIR / f"{Path(it.output).stem}-{token}"
            work.mkdir(parents=True, exist_ok=True)
            pieces = [client.submit(render_piece, it, spec, k, str(work), codec=codec,
                                    key=f"livecurve-piece-{token}-{i}-{k}", pure=False)
                      for k in range(len(it.segments))]
            fut = client.submit(join_item, it, pieces, str(out), force=force,
                                key=f"livecurve-join-{token}-{i}", pure=False)
            for p in pieces:
                kind[p.key] = ("piece", i)
            futures += pieces
        else:
            fut = client.submit(render_item, it, spec, str(out), codec=codec, force=force,
                                key=f"livecurve-item-{token}-{i}", pure=False)
        kind[fut.key] = ("item", i)
        futures.append(fut)
    frames = items_done = failed = 0
    split_counted: dict[int, int] = {}
    for fut in as_completed(futures, loop=client.loop):
        what, i = kind[fut.key]
        try:
            res = fut.result()
        except Exception as exc:  # the scheduler gave up on the task (e.g. workers died)
            res = {"status": "failed", "seconds": 0.0, "frames": 0, "worker": "",
                   "error": " ".join(f"{type(exc).__name__}: {exc}".split()),
                   "path": "", }
        if what == "piece":
            if not res.get("error"):
                frames += res["frames"]
                split_counted[i] = split_counted.get(i, 0) + res["frames"]
        else:
            results[i] = {k: res.get(k, "") for k in ("status", "seconds", "frames", "worker",
                                                      "flash", "error")}
            items_done += 1
            failed += res["status"] == "failed"
            if not items[i].segments and res["status"] != "failed":
                frames += res["frames"]
        fut.release()
        bar.update(items_done, frames, failed, force=what == "item")


def _sweep(out: Path, items) -> None:
    """Remove temporary files left by killed workers, and the segment work folder."""
    for it in items:
        stem = Path(it.output).stem
        for p in out.glob(f".{stem}.partial-*"):
            p.unlink(missing_ok=True)
    work = out / WORK_DIR
    if work.is_dir():
        for d in work.iterdir():
            if any(d.name.startswith(Path(it.output).stem + "-") for it in items):
                shutil.rmtree(d, ignore_errors=True)
        try:
            work.rmdir()
        except OSError:
            pass  # another batch is using it


def _row(it: Item, res: dict | None) -> dict:
    res = res or {"status": "failed", "seconds": "", "frames": 0, "worker": "",
                  "error": "not run"}
    sec = res.get("seconds", "")
    return {"source": it.source, "chain": it.chain, "settings": it.settings_text,
            "temp_c": "" if it.t_kelvin is None else f"{it.t_kelvin - 273.15:g}",
            "output": it.output, "status": res["status"],
            "seconds": f"{float(sec):.3f}" if sec not in ("", None) else "",
            "frames": res.get("frames", ""), "segments": len(it.segments) or 1,
            "worker": res.get("worker", ""), "flash": res.get("flash", ""),
            "error": res.get("error", "")}


# ---------------------------------------------------------------------------- the index
def index_text(rows) -> str:
    """``index.csv`` text: a header and one RFC 4180 row per item (fields quoted as needed)."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=INDEX_COLUMNS, lineterminator="\r\n",
                       quoting=csv.QUOTE_MINIMAL)
    w.writeheader()
    for r in rows:
        w.writerow({k: r.get(k, "") for k in INDEX_COLUMNS})
    return buf.getvalue()


def write_index(path: Path, rows) -> Path:
    from livecurve.media.atomic import atomic_output
    with atomic_output(path, force=True) as tmp:
        tmp.write_text(index_text(rows), encoding="utf-8", newline="")
    return path


def read_index(path: Path) -> dict:
    """Rows of an earlier ``index.csv`` keyed by output name ({} when absent or unreadable)."""
    try:
        with open(path, encoding="utf-8", newline="") as fh:
            return {r["output"]: r for r in csv.DictReader(fh) if r.get("output")}
    except (OSError, csv.Error, KeyError, UnicodeDecodeError):
        return {}


# ---------------------------------------------------------------------------- contact sheet
def _frame_of(path: Path, kind: str) -> np.ndarray | None:
    """One picture of an output as 8-bit R′G′B′: a still, or the middle frame of a clip."""
    from livecurve.errors import LivecurveError
    from livecurve.media.probe import probe, read_image
    from livecurve.media.source import open_source
    try:
        if kind == "still":
            rgb = read_image(path)
        else:
            info = probe(path)
            mid = ((info.n_frames or 1) // 2) / info.fps
            with open_source(str(path), start_s=mid, duration_s=1.0 / info.fps) as src:
                fr = src.read()
            if fr is None:
                return None
            rgb = fr.rgb
    except (LivecurveError, OSError):
        return None
    if rgb.ndim == 2:
        rgb = np.repeat(rgb[:, :, None], 3, axis=2)
    return (rgb >> 8).astype(np.uint8) if rgb.dtype == np.uint16 else rgb


#: Contact-sheet background and label colours (BGR, 8-bit).
SHEET_BG_BGR, SHEET_TEXT_BGR = (28, 24, 22), (225, 225, 225)


def contact_sheet(out: Path, items, rows) -> np.ndarray:
    """The contact sheet as a BGR uint8 picture: a tile per item, its name under it."""
    import cv2

    font = cv2.FONT_HERSHEY_SIMPLEX
    tiles = []
    for it, row in zip(items, rows, strict=True):
        rgb = _frame_of(out / it.output, it.kind) if row["status"] != "failed" else None
        if rgb is None:
            h = THUMB_W * 9 // 16
            pic = np.full((h, THUMB_W, 3), 40, np.uint8)
            cv2.putText(pic, row["status"] if row["status"] == "failed" else "no picture",
                        (8, h // 2), font, 0.5, (60, 60, 230), 1, cv2.LINE_AA)
        else:
            h = max(1, round(rgb.shape[0] * THUMB_W / rgb.shape[1]))
            pic = cv2.resize(cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR), (THUMB_W, h),
                             interpolation=cv2.INTER_AREA)
        name = Path(it.output).stem
        lines = [name[k:k + 30] for k in range(0, len(name), 30)][:4]
        label = np.full((14 * len(lines) + 8, THUMB_W, 3), SHEET_BG_BGR, np.uint8)
        for j, ln in enumerate(lines):
            cv2.putText(label, ln, (3, 14 + 14 * j), font, 0.36, SHEET_TEXT_BGR, 1, cv2.LINE_AA)
        tiles.append(np.concatenate([pic, label], axis=0))
    cols = min(len(tiles), max(1, math.ceil(math.sqrt(len(tiles)))), 6)
    th = max(t.shape[0] for t in tiles)
    gap = 6
    nrows = math.ceil(len(tiles) / cols)
    sheet = np.full((nrows * (th + gap) + gap, cols * (THUMB_W + gap) + gap, 3), SHEET_BG_BGR,
                    np.uint8)
    for k, t in enumerate(tiles):
        r, c = divmod(k, cols)
        y, x = gap + r * (th + gap), gap + c * (THUMB_W + gap)
        sheet[y:y + t.shape[0], x:x + THUMB_W] = t
    return sheet


def write_contact_sheet(path: Path, out: Path, items, rows) -> Path | None:
    """Write :func:`contact_sheet` as PNG (None when there are no items)."""
    if not items:
        return None
    from livecurve.outputs.plots import write_png
    write_png(path, contact_sheet(out, items, rows), force=True)
    return path
