"""``livecurve batch`` on a real Dask cluster (livecurve.outputs.batch, batchrun, segments).

A scheduler and two worker processes run on 127.0.0.1 (tests/dask_local.py).  Checks:
outputs equal single-machine renders (FFV1 frames and 16-bit PNG stills bit-exact, FFV1 being
lossless, IETF RFC 9043), the index names the workers, a killed worker does not stop the
batch, a rerun does no work, and a clip split into segments and joined equals a whole render
(ffmpeg's ``framemd5`` muxer hashes every decoded frame with its time stamp; the ``md5``
muxer over ``-c copy`` hashes the audio packets themselves).
"""

from __future__ import annotations

import csv
import os
import subprocess
import sys
import time

import numpy as np
import pytest

from livecurve.config.chainfile import load_chain
from livecurve.media import _ffmpeg
from livecurve.media.probe import read_image
from livecurve.media.source import open_source
from livecurve.outputs.batch import INDEX_COLUMNS, apply_settings, item_name, plan_batch
from livecurve.outputs.batchrun import index_text
from livecurve.outputs.demo import chain_path
from livecurve.outputs.render import render
from livecurve.outputs.segments import concat_quote, plan_segments
from tests.conftest import ROOT, run_cli
from tests.dask_local import LocalDask

CHAIN = str(chain_path("film_shoulder"))


def make_clip(path, *, seconds: float, size: str = "48x32", fps: int = 25,
              audio: bool = True, vcodec: str = "libx264", scale: str | None = None,
              ramp: bool = False) -> str:
    """A small test clip drawn by the bundled ffmpeg (testsrc2 pattern, a sine tone).

    ``ramp=True``: a flat grey whose level rises 4 codes a frame (ffmpeg's geq filter,
    ``N`` = frame number), so every frame is told apart by its mean.
    """
    pattern = (f"color=c=black:size={size}:rate={fps}:duration={seconds},"
               "geq=lum='16+4*N':cb=128:cr=128" if ramp
               else f"testsrc2=size={size}:rate={fps}:duration={seconds}")
    args = ["-v", "error", "-y", "-f", "lavfi", "-i", pattern]
    if audio:
        args += ["-f", "lavfi", "-i", f"sine=frequency=440:sample_rate=48000:"
                                      f"duration={seconds + 0.5}", "-c:a", "aac"]
    args += ["-c:v", vcodec, "-g", "12", "-pix_fmt",
             "yuv420p" if vcodec == "libx264" else "yuv444p", "-t", str(seconds)]
    args += (["-s", scale] if scale else []) + [str(path)]
    res = _ffmpeg.run(args)
    assert res.returncode == 0, res.stderr.decode()
    return str(path)


def make_still(path, *, w: int = 40, h: int = 24) -> str:
    from livecurve.media.atomic import write_still
    y, x = np.mgrid[0:h, 0:w]
    rgb = np.stack([x * 1600, y * 2700, (x + y) * 1000], axis=-1).astype(np.uint16)
    write_still(path, rgb)
    return str(path)


def frames_of(path) -> np.ndarray:
    with open_source(str(path)) as src:
        return np.stack([f.rgb for f in src])


def framemd5(path) -> list[str]:
    res = _ffmpeg.run(["-v", "error", "-i", str(path), "-map", "0:v", "-f", "framemd5", "-"])
    assert res.returncode == 0
    return [ln for ln in res.stdout.decode().splitlines() if not ln.startswith("#")]


def audio_md5(path) -> str:
    res = _ffmpeg.run(["-v", "error", "-i", str(path), "-map", "0:a", "-c", "copy",
                       "-f", "md5", "-"])
    assert res.returncode == 0
    return res.stdout.decode().strip()


def read_rows(folder) -> list[dict]:
    with open(folder / "index.csv", encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def cluster(tmp_path_factory, request):
    c = LocalDask(tmp_path_factory.mktemp("dask"))
    request.addfinalizer(c.close)
    return c.start(workers=2)


@pytest.fixture(scope="module")
def media(tmp_path_factory):
    d = tmp_path_factory.mktemp("media")
    return {"clip": make_clip(d / "clip.mp4", seconds=1.2),
            "still": make_still(d / "card.png"),
            "long": make_clip(d / "long.mp4", seconds=2.0),
            "ramp": make_clip(d / "ramp.mp4", seconds=2.0, ramp=True)}


# ---------------------------------------------------------------------------- no cluster
def test_names_are_deterministic_and_safe():
    a = item_name("/x/my clip;1.mp4", "/c/.hidden.toml", [("contrast", "22k", 22e3)], 40.0)
    assert a == item_name("/x/my clip;1.mp4", "/c/.hidden.toml", [("contrast", "22k", 22e3)],
                          40.0)
    assert a == "my_clip_1__.hidden__contrast-22k__t40C"
    b = item_name("/x/-a.mp4", "c.toml", [], None)
    assert b == "_a__c" and not b.startswith(("-", "."))


def test_colliding_names_get_a_hash(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    s1 = make_still(tmp_path / "a" / "card.png")
    s2 = make_still(tmp_path / "b" / "card.png")
    items, _ = plan_batch([CHAIN], [s1, s2])
    names = [it.output for it in items]
    assert len(set(names)) == 2 and all(n.startswith("card__film_shoulder_") for n in names)
    again, _ = plan_batch([CHAIN], [s1, s2])
    assert [it.output for it in again] == names


def test_grid_is_the_product(media):
    knee = str(chain_path("night_knee"))
    items, specs = plan_batch([CHAIN, knee], [media["still"], media["clip"]],
                              temps=["20,45C"], codec="ffv1")
    assert len(items) == 8 and set(specs) == {CHAIN, knee}
    assert items[0].output == "card__film_shoulder__t20C.png"
    assert items[-1].output == "clip__night_knee__t45C.mkv"
    assert [round(it.t_kelvin - 273.15, 6) for it in items[:2]] == [20, 45]
    assert len({it.output for it in items}) == 8


def test_index_survives_hostile_text():
    rows = [{"source": 'a,"b"\nc.mp4', "chain": "=cmd|x", "settings": "k=1 j=2",
             "temp_c": "", "output": "o.mp4", "status": "failed", "seconds": "",
             "frames": 0, "segments": 1, "worker": "", "error": "bad, \"very\" bad"}]
    text = index_text(rows)
    back = list(csv.DictReader(text.splitlines(keepends=True)))
    assert list(back[0]) == list(INDEX_COLUMNS)
    assert back[0]["source"] == 'a,"b"\nc.mp4' and back[0]["error"] == 'bad, "very" bad'


def test_segments_cover_once_in_order():
    for first, stop, n in [(0, 100, 30), (5, 6, 30), (0, 61, 30), (0, 90, 30), (3, 77, 7)]:
        segs = plan_segments(first, stop, segment_frames=n)
        flat = [i for a, b in segs for i in range(a, b)]
        assert flat == list(range(first, stop))
        assert all(b - a <= n + n // 4 for a, b in segs)


def test_bad_grid_input_names_file_and_key(tmp_path, media):
    r = run_cli("batch", "--chain", CHAIN, "--source", media["still"], "--set",
                "nosuch=1,2", "--out", tmp_path / "o")
    assert r.returncode == 2 and "film_shoulder.toml" in r.stderr and "nosuch" in r.stderr
    r = run_cli("batch", "--chain", CHAIN, "--source", media["still"], "--set",
                "contrast=1k", "--out", tmp_path / "o")
    assert r.returncode == 2 and "contrast" in r.stderr and "1k" in r.stderr
    r = run_cli("batch", "--chain", CHAIN, "--source", "camera:0", "--out", tmp_path / "o")
    assert r.returncode == 2 and "camera:0" in r.stderr
    r = run_cli("batch", "--chain", CHAIN, "--source", media["still"], "--out", tmp_path / "o",
                "--scheduler", "tcp://127.0.0.1:9")
    assert r.returncode == 2 and "tcp://127.0.0.1:9" in r.stderr
    r = run_cli("batch", "--chain", CHAIN, "--source", media["still"], "--out", tmp_path / "o",
                env={**os.environ, "LIVECURVE_SCHEDULER": "tcp://127.0.0.1:9"})
    assert r.returncode == 2 and "tcp://127.0.0.1:9" in r.stderr
    assert not (tmp_path / "o" / "index.csv").exists()


# ---------------------------------------------------------------------------- on a cluster
def test_batch_on_cluster_equals_single_renders(cluster, media, tmp_path):
    out = tmp_path / "grid"
    r = run_cli("batch", "--chain", CHAIN, "--source", media["clip"], "--source",
                media["still"], "--set", "contrast=15k,33k", "--codec", "ffv1", "--out", out,
                "--scheduler", cluster.address)
    assert r.returncode == 0, r.stderr
    rows = read_rows(out)
    assert len(rows) == 4 and {x["status"] for x in rows} == {"done"}
    workers = set(cluster.worker_addresses().values())
    used = {w for x in rows for w in x["worker"].split()}
    assert used <= workers and len(used) >= 2, (used, workers)
    assert (out / "contact_sheet.png").stat().st_size > 0
    spec = load_chain(CHAIN)
    for x in rows:
        settings = [("contrast", x["settings"].split("=")[1],
                     float(x["settings"].split("=")[1][:-1]) * 1e3)]
        ref = tmp_path / ("ref_" + x["output"])
        render(apply_settings(spec, settings), x["source"], ref, codec="ffv1", progress=False)
        if x["output"].endswith(".png"):
            got, want = read_image(out / x["output"]), read_image(ref)
            assert got.dtype == np.uint16 and np.array_equal(got, want)
        else:
            got, want = frames_of(out / x["output"]), frames_of(ref)
            assert got.dtype == np.uint16 and np.array_equal(got, want)
    # the two settings really differ (the comparison above is not trivially true)
    clips = sorted(x["output"] for x in rows if x["output"].endswith(".mkv"))
    assert not np.array_equal(frames_of(out / clips[0]), frames_of(out / clips[1]))

    # a rerun does no work: it does not even contact a scheduler (this one is closed)
    before = {p.name: p.stat().st_mtime_ns for p in out.iterdir() if p.suffix != ".csv"
              and p.name != "contact_sheet.png"}
    r = run_cli("batch", "--chain", CHAIN, "--source", media["clip"], "--source",
                media["still"], "--set", "contrast=15k,33k", "--codec", "ffv1", "--out", out,
                "--scheduler", "tcp://127.0.0.1:9")
    assert r.returncode == 0, r.stderr
    assert "0 rendered, 4 already present" in r.stdout
    assert {x["status"] for x in read_rows(out)} == {"present"}
    assert {p.name: p.stat().st_mtime_ns for p in out.iterdir() if p.suffix != ".csv"
            and p.name != "contact_sheet.png"} == before


def test_split_and_join_equals_a_whole_render(cluster, media, tmp_path):
    out = tmp_path / "it's split"  # a quote in the path goes through the concat script
    r = run_cli("batch", "--chain", CHAIN, "--source", media["long"], "--codec", "ffv1",
                "--segment-s", "0.6", "--out", out, "--scheduler", cluster.address)
    assert r.returncode == 0, r.stderr
    (row,) = read_rows(out)
    assert row["status"] == "done" and int(row["segments"]) == 4 and row["frames"] == "50"
    whole = tmp_path / "whole.mkv"
    render(load_chain(CHAIN), media["long"], whole, codec="ffv1", progress=False)
    joined = out / row["output"]
    assert framemd5(joined) == framemd5(whole)  # every frame once, in order, same times
    assert len(framemd5(joined)) == 50
    assert audio_md5(joined) == audio_md5(whole) == audio_md5(media["long"])
    assert sorted(p.name for p in out.iterdir()) == sorted([row["output"], "index.csv",
                                                             "contact_sheet.png"])
    assert "'" in concat_quote(out / "x")


def test_h264_split_has_every_frame_in_order(cluster, media, tmp_path):
    out = tmp_path / "h264"
    r = run_cli("batch", "--chain", CHAIN, "--source", media["ramp"], "--segment-s", "0.6",
                "--out", out, "--scheduler", cluster.address)
    assert r.returncode == 0, r.stderr
    (row,) = read_rows(out)
    assert int(row["segments"]) == 4
    got = frames_of(out / row["output"]).astype(np.float64).mean(axis=(1, 2, 3))
    ref = tmp_path / "ref.mkv"
    render(load_chain(CHAIN), media["ramp"], ref, codec="ffv1", progress=False)
    want = (frames_of(ref) / 257.0).mean(axis=(1, 2, 3))
    assert got.shape == want.shape == (50,)
    assert np.all(np.diff(want) > 0.5)  # the chain keeps the ramp's frames apart
    # each decoded frame is nearest to the reference frame of the same index
    err = np.abs(got[:, None] - want[None, :])
    assert np.array_equal(err.argmin(axis=1), np.arange(50))


def test_killed_worker_does_not_stop_the_batch(cluster, media, tmp_path):
    from distributed import Client
    out = tmp_path / "kill"
    cmd = [sys.executable, "-m", "livecurve.cli", "batch", "--chain", CHAIN,
           "--source", media["long"], "--set", "contrast=12k,20k,28k,40k", "--codec", "ffv1",
           "--segment-s", "0.7", "--out", str(out), "--scheduler", cluster.address]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    victim = None
    try:
        with Client(cluster.address, timeout=30, set_as_default=False) as c:
            t_end = time.monotonic() + 120
            while victim is None and time.monotonic() < t_end and proc.poll() is None:
                busy = {a for a, tasks in c.processing().items() if tasks}
                names = {a: n for n, a in cluster.worker_addresses().items()}
                for a in busy:
                    idx = int(names[a][1:]) - 1
                    victim = cluster.workers[idx]
                    break
                time.sleep(0.05)
        assert victim is not None, "the batch never started a task"
        cluster.kill(victim)
        stdout, stderr = proc.communicate(timeout=600)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if victim is not None:
            cluster.add_worker()  # back to two workers for the other tests
    assert proc.returncode == 0, stderr
    rows = read_rows(out)
    assert len(rows) == 4 and {x["status"] for x in rows} == {"done"}
    for x in rows:
        assert len(framemd5(out / x["output"])) == 50
    left = {p.name for p in out.iterdir()}
    assert left == {x["output"] for x in rows} | {"index.csv", "contact_sheet.png"}


def test_embedded_cluster_and_a_failed_item(media, tmp_path):
    odd = make_clip(tmp_path / "odd.mkv", seconds=0.4, audio=False, vcodec="ffv1",
                    scale="33x25")
    out = tmp_path / "embedded"
    r = run_cli("batch", "--chain", CHAIN, "--source", media["clip"], "--source", odd,
                "--out", out, "--workers", "2", env={**os.environ, "NUMBA_NUM_THREADS": "1"})
    assert r.returncode == 1, r.stderr
    rows = {x["source"]: x for x in read_rows(out)}
    assert rows[media["clip"]]["status"] == "done"
    assert rows[media["clip"]]["worker"].startswith("tcp://127.0.0.1:")
    bad = rows[odd]
    assert bad["status"] == "failed" and "even" in bad["error"]
    assert not (out / bad["output"]).exists()
    assert "1 failed" in r.stdout
    # progress from the futures: plain lines, items and frames (stderr is a pipe here)
    assert "batch: 2/2 items, 30/40 frames, 1 failed" in r.stderr.replace("\r", "\n")
    assert "\r" not in r.stderr
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [rows[media["clip"]]["output"], "index.csv", "contact_sheet.png"])
