"""Child process for test_preview_live_control: the preview's data path fed by a live ALSA device.

Usage: ``python -m tests.preview.live_preview_probe OUTDIR STILL CHAIN`` with ALSA_CONFIG_PATH
naming a configuration that defines the capture device ``lc_f32`` (mono FLOAT_LE, backed
by a raw file).  It opens a PreviewSession on STILL with ``--control knee_current=device:lc_f32``,
starts the live input as the preview does, renders a few frames and saves, per frame, the
control values the preview used and the live-input times they were read at.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

from livecurve.media.probe import probe
from livecurve.media.source import open_source
from livecurve.preview.window import PreviewSession


def main(out: Path, still: str, chain: str) -> None:
    info = probe(still)
    # A 60 s ring: the unpaced file device refills a 4 s ring every few milliseconds here,
    # which could overwrite a frame's samples between two reads of one frame.
    session = PreviewSession(chain, info, controls=["knee_current=device:lc_f32:seconds=60"])
    lives = list(session.flow.live_inputs())
    assert len(lives) == 1, lives
    li = lives[0]
    with open_source(still) as src:
        rgb = next(iter(src)).rgb
    session.render(rgb, 0)  # warm every kernel first: the file device outruns real time
    t_start = time.perf_counter()
    li.start()
    print(f"stream start took {1e3 * (time.perf_counter() - t_start):.1f} ms", flush=True)
    end = time.monotonic() + 20
    while li.samples_received < 48000 and time.monotonic() < end:
        time.sleep(0.0005)
    values, times = [], []
    for k in range(4):
        t0 = time.perf_counter()
        session.render(rgb, k)
        print(f"frame {k}: {1e3 * (time.perf_counter() - t0):.1f} ms, device at "
              f"{li.samples_received} samples", flush=True)
        values.append(np.asarray(session.flow.last_controls["knee_current"], dtype=np.float64))
        times.append(np.asarray(session.flow.last_control_times["knee_current"]))
    status = str(li.status)
    li.stop()
    np.savez(out / "trace.npz", values=np.stack(values), times=np.stack(times))
    (out / "status.txt").write_text(status)


if __name__ == "__main__":
    main(Path(sys.argv[1]), sys.argv[2], sys.argv[3])
