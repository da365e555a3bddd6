"""Render: put a clip, still, image sequence or camera through a chain and write a file.

Clips are encoded by the bundled ffmpeg (h264 or lossless ffv1) with the source's audio
copied across untouched; stills and image sequences written as ``.png``/``.tif`` are
lossless and 16-bit, so a frame can be compared exactly.  Every output is written to a
temporary file and renamed only when complete (``media.atomic``); an error or Ctrl-C
leaves no partial output.

An h264 render of a planar Y′CbCr clip (8, 10 or 12 bits; limited or full range) whose
matrix is the chain's stays in Y′CbCr: the clip is decoded as its planes, each frame goes
through the chain in one pass per line (:mod:`livecurve.engine.fused`) and the 8-bit
legal-range planes it makes are encoded as they are, with decoding, processing and
encoding overlapped (:func:`run_overlapped`).  Everything else (``--exact``, per-pixel
controls, ffv1, stills, side by side, R′G′B′ sources) takes the R′G′B′ path.
"""

from __future__ import annotations

import queue
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from livecurve.config.chainfile import ChainSpec
from livecurve.engine.frameflow import FrameFlow, bind_controls
from livecurve.errors import OutputError
from livecurve.media.planes import writer_layout
from livecurve.outputs.progress import Progress

STILL_EXT = (".png", ".tif", ".tiff")


@dataclass
class RenderReport:
    """What a render did: frames, seconds, achieved fps, output path, flash verdict."""

    output: str
    frames: int
    seconds: float
    fps: float
    table_bound_v: float
    flash: str | None = None


def render(spec: ChainSpec, source, output, *, start_s: float = 0.0,
           duration_s: float | None = None, codec: str | None = None,
           side_by_side: bool = False, force: bool = False, exact: bool = False,
           controls=(), progress: bool = True, t_kelvin: float | None = None,
           flash_check: bool = True, drift: bool = False, planar: bool = True) -> RenderReport:
    """Render *source* through the chain *spec* into *output*.

    Parameters
    ----------
    source : str
        Clip file, still, image sequence (``shot_%04d.png`` or a glob) or ``camera:N``.
    output : str
        ``.mp4``/``.mov``/``.mkv`` for clips; ``.png``/``.tif`` for stills (16-bit).
    codec : {'h264', 'ffv1'}, optional
        Default: h264, or ffv1 for ``.mkv``.
    side_by_side : bool
        Output the source on the left and the processed picture on the right.
    controls : list of str
        ``--control`` options (see :func:`livecurve.engine.frameflow.bind_controls`).
    drift : bool
        Let junction temperatures follow the chain's ``[thermal]`` warm-up and self-heating
        over the clip's time (tables rebuilt as they move).
    planar : bool
        Let an h264 render of a planar Y′CbCr clip (8, 10 or 12 bits, limited or full
        range) stay in Y′CbCr (decode planes, one pass per line, encode 8-bit legal-range
        planes, overlapped; see :func:`run_overlapped`).  False forces the R′G′B′
        reference path.
    """
    from livecurve.media.atomic import check_not_source, check_target, write_still
    from livecurve.media.source import open_source
    out = Path(output)
    check_not_source(source, out)
    check_target(out, force=force)
    ext = out.suffix.lower()
    still_out = ext in STILL_EXT
    src = open_source(source, start_s=start_s, duration_s=duration_s)
    with src:
        info = src.info
        if still_out and info.kind not in ("still", "sequence"):
            raise OutputError(f"{out}: a {ext} output takes a still or an image sequence; "
                              f"'{source}' is a {info.kind} (write .mp4 or .mkv)")
        if not still_out and ext not in (".mp4", ".mov", ".mkv"):
            raise OutputError(f"{out}: unknown output type '{ext}'; use .mp4, .mov, .mkv, "
                              ".png or .tif")
        bound = bind_controls(spec, controls, clip_path=source if info.kind == "clip" else None)
        n_total = _frames_expected(src, info)
        out_dtype = np.uint16 if (still_out or (codec or _codec_for(ext)) == "ffv1") \
            else np.uint8
        flow = FrameFlow(spec, width=info.width, height=info.height, fps=info.fps,
                         clip_matrix=info.colour_matrix, controls=bound, exact=exact,
                         out_dtype=out_dtype, t_kelvin=t_kelvin, drift=drift)
        flash = _flash_meter(flow, info.fps) if (flash_check and bound) else None
        codec_ = codec or _codec_for(ext)
        if not still_out and codec_ == "h264" and (info.width % 2 or info.height % 2):
            from livecurve.errors import MediaError
            raise MediaError(f"{source}: the picture is {info.width}x{info.height}; h264 4:2:0 "
                             "needs even width and height. Write .mkv (lossless ffv1) for "
                             "odd sizes")
        planar = None if (still_out or side_by_side or codec_ != "h264" or not planar) \
            else _planar_layout(info, flow)
        live = list(flow.live_inputs())
        for li in live:
            li.start()
        bar = Progress(n_total, enabled=progress, desc="render", unit="frame")
        t0 = time.perf_counter()
        done = 0
        if still_out:
            if info.kind == "sequence" and "%" not in out.name and n_total and n_total > 1:
                raise OutputError(f"{out}: an image sequence needs a numbered output name, "
                                  "e.g. out_%04d.png")
            for fr in src:
                rgb = flow.process(fr.rgb, fr.index)
                img = _side(fr.rgb, rgb, out_dtype) if side_by_side else rgb
                name = str(out) % fr.index if "%" in out.name else str(out)
                write_still(name, img, force=force)
                done += 1
                bar.update(done)
        else:
            from livecurve.media.encode import ClipWriter
            w = info.width * (2 if side_by_side else 1)
            audio = source if (info.kind == "clip" and info.has_audio) else None
            with ClipWriter(out, width=w, height=info.height, fps=info.fps,
                            codec=codec or _codec_for(ext), audio_from=audio,
                            audio_start_s=start_s, audio_duration_s=duration_s, force=force,
                            matrix=flow.standard,
                            layout=None if planar is None else writer_layout(planar)) as writer:
                if planar is not None:
                    from livecurve.media.planes import PlaneClipSource, is_full_range
                    src.close()   # the planes come from a decoder of their own
                    psrc = PlaneClipSource(info, start_s=start_s, duration_s=duration_s)
                    with psrc:
                        done = run_overlapped(psrc, flow, writer, flash=flash, progress=bar,
                                              in_legal=not is_full_range(info),
                                              in_bits=psrc.bits)
                for fr in (src if planar is None else ()):
                    rgb = flow.process(fr.rgb, fr.index)
                    if flash is not None:
                        flash.push(flow.planes_out)
                    writer.write(_side(fr.rgb, rgb, out_dtype) if side_by_side else rgb)
                    done += 1
                    bar.update(done)
                if done == 0:
                    raise OutputError(f"{out}: the source gave no frames")
        bar.update(done, force=True)
        bar.close()
        for li in live:
            if not li.status.ok:
                print(f"livecurve: control input {li.name}: {li.status}", file=sys.stderr)
            li.stop()
    el = time.perf_counter() - t0
    return RenderReport(str(out), done, el, done / el if el > 0 else 0.0,
                        flow.engine.worst_table_err_v,
                        None if flash is None else flash_text(flash.report()))


#: Frames allowed to wait between decoder and kernel, and between kernel and encoder.
QUEUE_FRAMES = 2
_END = object()


def _planar_layout(info, flow: FrameFlow) -> str | None:
    """The clip's planar layout when it can go through the one-pass kernel untouched by any
    R′G′B′ conversion (planar Y′CbCr at 8, 10 or 12 bits, the chain's matrix is the
    clip's, tables not the solver, no per-pixel control), else None.  The kernel writes
    :func:`~livecurve.media.planes.writer_layout` of it."""
    from livecurve.media.planes import plane_layout
    from livecurve.media.source import default_matrix
    layout = plane_layout(info)
    if layout is None or not flow.can_fuse():
        return None
    matrix = info.colour_matrix or default_matrix(info.width, info.height)
    return layout if matrix == flow.standard else None


class _Stage(threading.Thread):
    """A thread that runs *fn* and keeps the exception that ended it."""

    def __init__(self, fn, name: str):
        super().__init__(name=name, daemon=True)
        self.fn, self.error = fn, None

    def run(self) -> None:
        try:
            self.fn()
        except BaseException as exc:  # noqa: BLE001 - handed to the main thread
            self.error = exc


def _put(q: queue.Queue, item, stop: threading.Event, consumer=None) -> bool:
    """Put *item* unless *stop* is set (or the *consumer* thread has died) first; False
    when it was not put."""
    while not stop.is_set() and (consumer is None or consumer.is_alive()):
        try:
            q.put(item, timeout=0.1)
            return True
        except queue.Full:
            continue
    return False


def _get(q: queue.Queue, stop: threading.Event, others=()):
    """Next item, or _END when *stop* is set or a thread in *others* died."""
    while not stop.is_set():
        try:
            return q.get(timeout=0.1)
        except queue.Empty:
            if any(not t.is_alive() for t in others):
                try:
                    return q.get_nowait()
                except queue.Empty:
                    return _END
    return _END


def run_overlapped(src, flow: FrameFlow, writer, *, flash=None, progress=None,
                   in_legal: bool = True, in_bits: int = 8, queue_frames: int = QUEUE_FRAMES,
                   trace: list | None = None) -> int:
    """Decode, process and encode at once: a decoder thread, the kernel here, an encoder
    thread, with at most *queue_frames* frames waiting on each side (so at most
    2·queue_frames + 3 frames exist at a time).  Frames reach the writer in the source's
    order; returns the number written.

    *trace*, when given, receives ``(stage, frame index, frames waiting)`` tuples for tests.
    """
    q_in: queue.Queue = queue.Queue(maxsize=queue_frames)
    q_out: queue.Queue = queue.Queue(maxsize=queue_frames)
    free: queue.Queue = queue.Queue()
    stop = threading.Event()
    written = [0]

    def decode():
        for fr in src:
            if trace is not None:
                trace.append(("decoded", fr.index, q_in.qsize()))
            if not _put(q_in, fr, stop):
                return
        _put(q_in, _END, stop)

    def encode():
        while True:
            item = _get(q_out, stop)
            if item is _END:
                return
            index, planes = item
            writer.write_planes(*planes)
            written[0] += 1
            if trace is not None:
                trace.append(("encoded", index, q_out.qsize()))
            free.put(planes)

    dec, enc = _Stage(decode, "livecurve-decode"), _Stage(encode, "livecurve-encode")
    dec.start()
    enc.start()
    done = 0
    try:
        while True:
            fr = _get(q_in, stop, (dec,))
            if fr is _END:
                break
            try:
                planes = free.get_nowait()
            except queue.Empty:
                planes = tuple(np.empty(a.shape, np.uint8) for a in (fr.y, fr.cb, fr.cr))
            flow.process_planes(fr.y, fr.cb, fr.cr, fr.index, in_legal=in_legal,
                                in_bits=in_bits, out=planes)
            if flash is not None:
                flash.push(flash_volts(flow, planes))
            if not _put(q_out, (fr.index, planes), stop, enc):
                break
            done += 1
            if progress is not None:
                progress.update(done)
        _put(q_out, _END, stop, enc)
        enc.join()
    finally:
        stop.set()
        dec.join(5.0)
        enc.join(5.0)
    for t in (dec, enc):
        if t.error is not None:
            raise t.error
    return written[0]


def flash_volts(flow: FrameFlow, planes) -> np.ndarray:
    """The picture the flash estimate reads: every 4th line and sample of the output
    planes, in volts (the same for render and preview)."""
    from livecurve.engine.fused import sampled_volts
    return sampled_volts(*planes, space=flow.spec.space, standard=flow.standard, step=4)


def flash_text(rep) -> str:
    """One line on a flash report (ITU-R BT.1702 estimate)."""
    if rep.verdict == "ok":
        return (f"flash check: ok (at most {rep.max_flashes_per_s} flashes in any second; "
                "ITU-R BT.1702 estimate)")
    when = "" if rep.first_hazard_s is None else f", first at {rep.first_hazard_s:.2f} s"
    return (f"flash check: {rep.verdict.upper()} — up to {rep.max_flashes_per_s} general and "
            f"{rep.max_red_flashes_per_s} red flashes in one second{when}. Pictures that flash "
            "more than 3 times a second can trigger seizures in people with photosensitive "
            "epilepsy (ITU-R BT.1702); slow the modulation or reduce its depth before showing "
            "this to anyone.")


def _codec_for(ext: str) -> str:
    return "ffv1" if ext == ".mkv" else "h264"


def _frames_expected(src, info) -> int | None:
    if info.n_frames is None:
        return None
    stop = src.stop_index if src.stop_index is not None else info.n_frames
    return max(0, min(stop, info.n_frames) - src.first_index)


def _side(before: np.ndarray, after: np.ndarray, dtype) -> np.ndarray:
    """Before | after, both in the output's word size."""
    b = before
    if b.dtype != np.dtype(dtype):
        b = (b.astype(np.uint16) * 257) if dtype == np.uint16 else (b >> 8).astype(np.uint8)
    return np.concatenate([b, after], axis=1)


def _flash_meter(flow: FrameFlow, fps: float):
    """A photosensitive-flash meter on the output (ITU-R BT.1702 estimate), or None."""
    try:
        from livecurve.monitors.flash import FlashMeter
    except ImportError:  # monitors not installed in this build
        return None
    return FlashMeter(fps, space=flow.spec.space, standard=flow.standard)
