"""A real Dask cluster on 127.0.0.1 for tests: ``dask scheduler`` and ``dask worker`` processes.

The programs are run as ``python -m distributed.cli.dask_scheduler`` / ``dask_worker`` with
this interpreter (the same programs the ``dask scheduler`` / ``dask worker`` commands start),
on random free ports, with this checkout first on ``PYTHONPATH``.  Workers run without a
nanny, so killing one removes it for good (a nanny would restart it).  Every process is
stopped by :meth:`LocalDask.close`, which the fixtures register as a finalizer.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

from tests.conftest import ROOT, require

try:
    import distributed  # noqa: F401
    HAVE_DISTRIBUTED = True
except ImportError:  # pragma: no cover - a runtime dependency
    HAVE_DISTRIBUTED = False


def _env() -> dict:
    e = dict(os.environ)
    e["PYTHONPATH"] = str(ROOT) + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    e["NUMBA_NUM_THREADS"] = "1"
    e.pop("LIVECURVE_SCHEDULER", None)
    return e


class LocalDask:
    """A scheduler and worker processes started by a test."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self.scheduler: subprocess.Popen | None = None
        self.workers: list[subprocess.Popen] = []
        self.address = ""
        self._n = 0

    def start(self, workers: int = 2, timeout_s: float = 90.0) -> LocalDask:
        require(HAVE_DISTRIBUTED, "Python package 'distributed'")
        sfile = self.folder / "scheduler.json"
        self.scheduler = self._spawn([sys.executable, "-m", "distributed.cli.dask_scheduler",
                                      "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                      "--scheduler-file", str(sfile)], "scheduler")
        t_end = time.monotonic() + timeout_s
        while not sfile.exists() or not sfile.read_text().strip():
            if self.scheduler.poll() is not None or time.monotonic() > t_end:
                self.close()
                raise RuntimeError(f"dask scheduler did not start: {self._log('scheduler')}")
            time.sleep(0.1)
        self.address = json.loads(sfile.read_text())["address"]
        for _ in range(workers):
            self.add_worker()
        self.wait_for_workers(workers, timeout_s)
        return self

    def add_worker(self) -> subprocess.Popen:
        self._n += 1
        p = self._spawn([sys.executable, "-m", "distributed.cli.dask_worker", self.address,
                         "--host", "127.0.0.1", "--nthreads", "1", "--no-nanny",
                         "--no-dashboard", "--name", f"w{self._n}",
                         "--local-directory", str(self.folder / f"w{self._n}")],
                        f"worker{self._n}")
        self.workers.append(p)
        return p

    def wait_for_workers(self, n: int, timeout_s: float = 90.0) -> None:
        from distributed import Client
        with Client(self.address, timeout=30, set_as_default=False) as c:
            c.wait_for_workers(n, timeout=timeout_s)

    def worker_addresses(self) -> dict:
        """Worker name → address."""
        from distributed import Client
        with Client(self.address, timeout=30, set_as_default=False) as c:
            info = c.scheduler_info(n_workers=-1)["workers"]
        return {w["name"]: a for a, w in info.items()}

    def _spawn(self, cmd, tag) -> subprocess.Popen:
        log = open(self.folder / f"{tag}.log", "wb")  # noqa: SIM115 - closed with the process
        return subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, env=_env(),
                                cwd=self.folder, start_new_session=True)

    def _log(self, tag) -> str:
        with contextlib.suppress(OSError):
            return (self.folder / f"{tag}.log").read_text()[-2000:]
        return ""

    def kill(self, proc: subprocess.Popen) -> None:
        """SIGKILL one worker process (as a crash would)."""
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)

    def close(self) -> None:
        procs = [*self.workers, self.scheduler]
        for p in procs:
            if p is not None and p.poll() is None:
                p.terminate()
        for p in procs:
            if p is None:
                continue
            try:
                p.wait(timeout=5)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(timeout=10)
        self.workers, self.scheduler = [], None
