"""What the benchmark scripts record about the machine and the numba runtime."""

from __future__ import annotations

import os
import platform

import numba


def runtime_info() -> dict:
    """Threads, threading layer, cores and versions, for a benchmark's JSON."""
    return {
        "numba_threads": numba.get_num_threads(),
        "threading_layer": numba.threading_layer(),
        "cpu_count": os.cpu_count(),
        "python": platform.python_version(),
        "numba": numba.__version__,
    }
