"""A Dask ``distributed`` client: a local cluster in this process, or an existing scheduler.

With no address (neither ``--scheduler`` nor the ``LIVECURVE_SCHEDULER`` environment
variable) a :class:`distributed.LocalCluster` is started on 127.0.0.1 with one worker
*process* per core (fewer when there is less work) and one task thread each; each worker's
numba thread pool gets ``cores // workers`` threads (``NUMBA_NUM_THREADS``), so the workers
together never ask for more threads than the machine has.  Everything listens on 127.0.0.1
only (the scheduler's status page on a free port).  The cluster is shut down when the block
ends.

With an address the client connects to that scheduler and leaves its workers alone.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket

from livecurve.errors import ConfigError

#: Environment variable naming a scheduler (``tcp://HOST:PORT``) when no option does.
ENV_SCHEDULER = "LIVECURVE_SCHEDULER"
#: Seconds to wait for a scheduler to answer.
CONNECT_TIMEOUT_S = 15


def scheduler_address(option: str | None) -> str | None:
    """The scheduler to use: *option*, else ``$LIVECURVE_SCHEDULER``, else None (local)."""
    addr = option if option else os.environ.get(ENV_SCHEDULER, "").strip() or None
    if addr is not None and "://" not in addr and ":" not in addr:
        raise ConfigError("a scheduler address looks like tcp://HOST:PORT", key="--scheduler",
                          value=addr)
    return addr


def cores() -> int:
    """Cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def _refused(address: str) -> None:
    """Fail at once when nothing listens at a ``tcp://HOST:PORT`` address.

    Dask's client retries a refused connection until its timeout; a closed port is an
    input error that can be named straight away.
    """
    rest = address.split("://", 1)[1] if "://" in address else address
    if not address.startswith(("tcp://", "localhost:", "127.")) and "://" in address:
        return  # other transports (tls://, inproc://): leave to Dask
    host, _, port = rest.rpartition(":")
    try:
        port_n = int(port)
    except ValueError as exc:
        raise ConfigError("a scheduler address looks like tcp://HOST:PORT",
                          key="--scheduler", value=address) from exc
    try:
        socket.create_connection((host.strip("[]"), port_n), timeout=CONNECT_TIMEOUT_S).close()
    except ConnectionRefusedError as exc:
        raise ConfigError("no Dask scheduler listens there (connection refused)",
                          key="--scheduler", value=address) from exc
    except OSError:
        pass  # unreachable or slow: let Dask's client try and report


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, *, n_workers: int | None = None,
                tasks: int | None = None):
    """Yield a connected :class:`distributed.Client`; tear down what was started.

    Parameters
    ----------
    scheduler : str, optional
        ``tcp://HOST:PORT`` of an existing scheduler, or None for a local cluster.
    n_workers : int, optional
        Local cluster only: worker processes (default one per core).
    tasks : int, optional
        Local cluster only: number of tasks about to be sent; no more workers than this.
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - a runtime dependency
        raise ConfigError("the Python package 'distributed' (Dask) is not installed",
                          key="--scheduler", value=scheduler or "local") from exc
    if scheduler:
        _refused(scheduler)
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise ConfigError(f"cannot reach a Dask scheduler there ({exc})",
                              key="--scheduler", value=scheduler) from exc
        try:
            yield client
        finally:
            client.close()
        return
    n = n_workers or cores()
    if tasks is not None:
        n = max(1, min(n, tasks))
    env = {"NUMBA_NUM_THREADS": str(max(1, cores() // n))}
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                           host="127.0.0.1", dashboard_address="127.0.0.1:0",
                           silence_logs=logging.ERROR, env=env)
    try:
        client = Client(cluster, set_as_default=False)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()
