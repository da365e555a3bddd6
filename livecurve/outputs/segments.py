"""Long clips in time segments: cut points, one segment's render, the join without re-encoding.

Every output frame depends only on its own source frame and its time (controls, drift and
line dynamics are functions of the frame index), so frames ``[i0, i1)`` of a clip rendered on
their own are the same frames a whole render makes.  A long clip is therefore cut into
segments of whole frames, each rendered anywhere by :func:`render_segment`, and joined by
:func:`join_segments`:

* **Cut points** are frame indices (:func:`plan_segments`); a segment is asked for as the
  window ``start_s = i0 / fps``, ``duration_s = (i1 - i0) / fps``, which
  :mod:`livecurve.media.source` maps back to exactly ``[i0, i1)``.
* **Keyframes**: each segment is a separate encode, so it starts with a keyframe (an IDR
  picture for H.264; every FFV1 frame is intra), and every join falls on a keyframe.
* **The join** is ffmpeg's concat demuxer with stream copy (``-c copy``): no picture is
  decoded or encoded again.  Each segment is entered with an ``inpoint`` at its first video
  packet and a ``duration`` of its frame count over the rate, so the joined video has every
  frame once, in order, with the same time stamps a whole render gives.  Only the video of
  the segments is used; the source's audio is stream-copied once, over the whole span, the
  way :class:`livecurve.media.encode.ClipWriter` copies it for a whole render.
* The joined file is written through :func:`livecurve.media.atomic.atomic_output`.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction
from pathlib import Path

from livecurve.errors import MediaError, OutputError
from livecurve.media import _ffmpeg
from livecurve.media.atomic import atomic_output

#: Default segment length, seconds of source time.
DEFAULT_SEGMENT_S = 30.0


def plan_segments(first: int, stop: int, *, segment_frames: int) -> list[tuple[int, int]]:
    """Cut frames ``[first, stop)`` into runs of at most *segment_frames* frames.

    Returns
    -------
    list of (int, int)
        ``(i0, i1)`` windows, i1 excluded, covering the range once and in order.  A last
        run shorter than a quarter segment is merged into the one before it.
    """
    if segment_frames < 1:
        raise OutputError(f"segment length must be at least one frame (got {segment_frames})")
    if stop <= first:
        return []
    cuts = list(range(first, stop, segment_frames)) + [stop]
    if len(cuts) > 2 and cuts[-1] - cuts[-2] < max(1, segment_frames // 4):
        del cuts[-2]
    return list(zip(cuts[:-1], cuts[1:], strict=True))


def segment_window(i0: int, i1: int, fps: float) -> tuple[float, float]:
    """``(start_s, duration_s)`` that select exactly frames ``[i0, i1)`` at *fps*."""
    return i0 / fps, (i1 - i0) / fps


def render_segment(spec, source: str, path, i0: int, i1: int, *, fps: float, codec: str,
                   t_kelvin: float | None = None, controls=(), exact: bool = False,
                   drift: bool = False):
    """Render frames ``[i0, i1)`` of *source* into *path* (overwritten), checking the count.

    Returns
    -------
    livecurve.outputs.render.RenderReport
    """
    from livecurve.outputs.render import render
    start_s, dur_s = segment_window(i0, i1, fps)
    rep = render(spec, source, path, start_s=start_s, duration_s=dur_s, codec=codec,
                 force=True, exact=exact, controls=controls, progress=False,
                 t_kelvin=t_kelvin, drift=drift, flash_check=False)
    if rep.frames != i1 - i0:
        raise MediaError(f"{source}: frames {i0}…{i1 - 1} gave {rep.frames} frames, "
                         f"expected {i1 - i0}")
    return rep


_TB = re.compile(r"^#tb 0: (\d+)/(\d+)", re.M)


def first_video_pts_s(path) -> float:
    """Time stamp of the first video packet of *path*, seconds (read without decoding)."""
    res = _ffmpeg.run(["-v", "error", "-i", str(path), "-map", "0:v:0", "-c", "copy",
                       "-frames:v", "1", "-f", "framecrc", "-"])
    text = res.stdout.decode("utf-8", "replace")
    tb = _TB.search(text)
    rows = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    if res.returncode != 0 or tb is None or not rows:
        raise MediaError(f"{path}: cannot read its first video packet: "
                         f"{_ffmpeg.tail_text(res.stderr.decode('utf-8', 'replace').splitlines())}")
    pts = int(rows[0].split(",")[2])
    return float(Fraction(pts * int(tb.group(1)), int(tb.group(2))))


def concat_quote(path) -> str:
    """*path* as one quoted token of ffmpeg's concat-script grammar.

    Inside single quotes everything is literal; a single quote itself is written by
    closing the quotes, an escaped quote, and reopening (``'\\''``).  Line breaks cannot be
    expressed in that grammar and are refused.
    """
    s = str(Path(path).resolve())
    if "\n" in s or "\r" in s or "\0" in s:
        raise OutputError(f"{s!r}: a line break in a path cannot go into a concat list")
    return "'" + s.replace("'", "'\\''") + "'"


def concat_script(parts) -> str:
    """The concat-demuxer script for ``(path, inpoint_s, duration_s)`` parts."""
    lines = ["ffconcat version 1.0"]
    for path, inpoint, dur in parts:
        lines += [f"file {concat_quote(path)}", f"inpoint {inpoint:.6f}",
                  f"duration {dur:.9f}"]
    return "\n".join(lines) + "\n"


def join_segments(segments, output, *, fps: float, audio_from=None,
                  audio_start_s: float = 0.0, audio_duration_s: float | None = None,
                  force: bool = False) -> Path:
    """Join rendered segments into *output* by stream copy, with the source's audio once.

    Parameters
    ----------
    segments : list of (path, n_frames)
        Segment files in time order and the number of frames each holds.
    output : str or os.PathLike
        Final file; same container type as the segments.
    fps : float
        Frame rate (durations in the concat script are ``n_frames / fps``).
    audio_from : str, optional
        Source whose first audio stream is copied for ``audio_start_s`` … ``+ audio_duration_s``
        (the same span and options a whole render copies).

    Returns
    -------
    pathlib.Path
        The joined file.
    """
    if not segments:
        raise OutputError(f"{output}: no segments to join")
    parts = [(p, first_video_pts_s(p), n / fps) for p, n in segments]
    out = Path(output)
    with atomic_output(out, force=force) as tmp:
        script = tmp.with_name(tmp.name + ".ffconcat")
        script.write_text(concat_script(parts))
        try:
            args = ["-v", "error", "-y", "-f", "concat", "-safe", "0", "-i", str(script)]
            if audio_from is not None:
                if audio_start_s > 0:
                    args += ["-ss", f"{audio_start_s:.6f}"]
                if audio_duration_s is not None:
                    args += ["-t", f"{float(audio_duration_s):.6f}"]
                args += ["-i", str(audio_from)]
            args += ["-map", "0:v:0"]
            if audio_from is not None:
                args += ["-map", "1:a:0"]
            args += ["-c", "copy"]
            if out.suffix.lower() in (".mp4", ".mov"):
                args += ["-movflags", "+faststart"]
            res = _ffmpeg.run(args + [str(tmp)])
        finally:
            script.unlink(missing_ok=True)
        if res.returncode != 0:
            raise OutputError(f"{out}: joining {len(parts)} segments failed: "
                              + _ffmpeg.tail_text(res.stderr.decode("utf-8", "replace")
                                                  .splitlines()))
    return out


def segment_frames_for(seconds: float, fps: float) -> int:
    """Whole frames in *seconds* of source time at *fps* (at least one)."""
    if not (math.isfinite(seconds) and seconds > 0):
        raise OutputError(f"segment length {seconds!r} s must be a positive number of seconds")
    return max(1, round(seconds * fps))
