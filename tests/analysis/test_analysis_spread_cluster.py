"""Monte Carlo trials in blocks on Dask: the same seed gives the same result anywhere.

Block *b* of a run draws from ``numpy.random.SeedSequence(seed, spawn_key=(b,))`` (numpy's
documented way to derive independent streams), so the trials do not depend on where a
block runs or on how many workers there are.  A real scheduler and two worker processes
run on 127.0.0.1 (tests/dask_local.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.analysis.spread import TRIALS_PER_BLOCK, block_seed, monte_carlo
from livecurve.config.chainfile import load_chain
from livecurve.outputs.demo import chain_path
from tests.conftest import run_cli
from tests.dask_local import LocalDask

TRIALS = 2 * TRIALS_PER_BLOCK + 7  # three blocks, the last one short


@pytest.fixture(scope="module")
def cluster(tmp_path_factory, request):
    c = LocalDask(tmp_path_factory.mktemp("dask"))
    request.addfinalizer(c.close)
    return c.start(workers=2)


def _run(**kw):
    return monte_carlo(load_chain(chain_path("shadow_crush")), trials=TRIALS, seed=9,
                       points=11, ramp_steps=5, rank=False, **kw)


def test_blocks_have_their_own_streams():
    a = np.random.default_rng(block_seed(9, 0)).standard_normal(4)
    b = np.random.default_rng(block_seed(9, 1)).standard_normal(4)
    again = np.random.default_rng(block_seed(9, 0)).standard_normal(4)
    assert np.array_equal(a, again) and not np.array_equal(a, b)


def test_same_seed_same_trials_here_and_on_the_cluster(cluster):
    here = _run()
    there = _run(scheduler=cluster.address)
    assert np.array_equal(here.curves, there.curves)
    assert np.array_equal(here.delta_e, there.delta_e)
    assert np.array_equal(here.cast, there.cast)
    # the blocks differ from each other (no block repeats another's draws)
    n = TRIALS_PER_BLOCK
    assert not np.array_equal(here.curves[:n], here.curves[n:2 * n])


def test_same_seed_on_the_embedded_cluster():
    here = _run()
    local = _run(scheduler="local")
    assert np.array_equal(here.curves, local.curves)


def test_spread_command_on_the_cluster(cluster, tmp_path):
    chain = chain_path("shadow_crush")
    a = run_cli("spread", chain, "--trials", TRIALS, "--seed", 4, "--out", tmp_path / "a",
                "--quiet")
    b = run_cli("spread", chain, "--trials", TRIALS, "--seed", 4, "--out", tmp_path / "b",
                "--quiet", "--scheduler", cluster.address)
    assert a.returncode == 0 and b.returncode == 0, a.stderr + b.stderr
    assert (tmp_path / "a" / "spread.csv").read_text() == \
        (tmp_path / "b" / "spread.csv").read_text()
    c = run_cli("spread", chain, "--trials", 3, "--scheduler", "nonsense", "--out",
                tmp_path / "c")
    assert c.returncode == 2 and "nonsense" in c.stderr


def test_scheduler_from_the_environment(tmp_path):
    import os
    env = {**os.environ, "LIVECURVE_SCHEDULER": "nonsense"}
    r = run_cli("spread", chain_path("shadow_crush"), "--trials", 3, "--out", tmp_path / "s",
                env=env)
    assert r.returncode == 2 and "nonsense" in r.stderr and "--scheduler" in r.stderr
