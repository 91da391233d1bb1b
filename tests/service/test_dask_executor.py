"""executor: dask on a distributed.LocalCluster of 2 worker processes: whole calls and block
spans run on the cluster, with the same figures to the last bit as the local process pool,
also when a worker dies in the middle (Dask runs its tasks again elsewhere)."""

from __future__ import annotations

import asyncio
import os
import signal
import subprocess
import sys
import threading
import time

import distributed  # the test extra has it; the service itself imports it only for dask
import pytest

import core
from service.errors import ComputationUnavailable
from service.executor import ComputePool, Cost
from service.metrics import Metrics
from tests.service.test_block_parallel import CALLS, SAMPLES, _figures, _split_run


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, worker_dashboard_address=None) as c:
        yield c


@pytest.fixture(scope="module")
def dask_pool(cluster):
    pool = ComputePool(kind="dask", workers=1, metrics=Metrics(),
                       dask_scheduler=cluster.scheduler_address)
    pool.start()
    yield pool
    pool.shutdown()


def test_the_pool_has_a_slot_per_cluster_thread(dask_pool):
    assert dask_pool.workers == 2


@pytest.mark.parametrize("name", list(CALLS))
def test_split_requests_on_the_cluster_match_the_local_figures(dask_pool, name):
    fn, args, kwargs = CALLS[name]
    alone = fn(*args, **{"precision": core.Precision(samples=SAMPLES), "seed": 2026, **kwargs})
    before = dask_pool.scheduler.spans_started
    on_cluster = _split_run(dask_pool, fn, args, kwargs)
    assert dask_pool.scheduler.spans_started - before >= 2
    assert _figures(on_cluster) == _figures(alone)


def test_a_whole_call_on_the_cluster_matches_the_local_figures(dask_pool):
    args = (CALLS["exceedance, conditional"][1][0], [40.0])
    kwargs = {"precision": core.Precision(samples=2000), "seed": 9, "method": "conditional"}
    alone = core.estimate_exceedance(*args, **kwargs)
    remote = asyncio.run(dask_pool.run(core.estimate_exceedance, *args, wall_limit_s=60,
                                       cost=Cost(samples=2000), **kwargs))
    assert _figures(remote) == _figures(alone)


def test_a_worker_killed_mid_request_changes_no_figure(cluster, dask_pool):
    fn, args, kwargs = CALLS["exceedance, conditional"]
    samples = 1_500_000  # long enough to kill a worker while its spans run
    kwargs = {**kwargs, "precision": core.Precision(samples=samples), "seed": 77}
    alone = fn(*args, **kwargs)
    pids = [w.process.pid for w in cluster.workers.values()]
    killed_at: list[float] = []

    def kill_one_once_spans_run() -> None:
        deadline = time.monotonic() + 30
        start = dask_pool.scheduler.spans_started
        while dask_pool.scheduler.spans_started < start + 4 and time.monotonic() < deadline:
            time.sleep(0.01)
        os.kill(pids[0], signal.SIGKILL)
        killed_at.append(time.monotonic())

    killer = threading.Thread(target=kill_one_once_spans_run)
    killer.start()
    remote = asyncio.run(dask_pool.run(fn, *args, wall_limit_s=120,
                                       cost=Cost(samples=samples, per_sample=5.0, split=True),
                                       **kwargs))
    finished = time.monotonic()
    killer.join()
    assert killed_at and killed_at[0] < finished, "the worker was not killed mid-request"
    assert _figures(remote) == _figures(alone)


def test_the_service_does_not_import_dask_unless_asked():
    code = ("import sys; from service.app import create_app; from service.settings import "
            "Settings; create_app(Settings()); print('distributed' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120)
    assert out.stdout.strip() == "False"


def test_a_lost_scheduler_connection_is_a_503_at_once_and_the_pool_connects_again(cluster):
    # Dask closes a client whose scheduler stayed away past its connect timeout; closing the
    # client here stands for that. Requests are then refused at once (503 worker_lost, which a
    # batch item retries) instead of failing with a 500 or waiting, and a background thread
    # connects again (the scheduler is back: here it never left).
    pool = ComputePool(kind="dask", workers=1, metrics=Metrics(),
                       dask_scheduler=cluster.scheduler_address)
    pool.start()
    try:
        pool.backend._client.close()
        args = (CALLS["exceedance, conditional"][1][0], [40.0])
        kwargs = {"precision": core.Precision(samples=2000), "seed": 9, "method": "conditional"}
        started = time.monotonic()
        with pytest.raises(ComputationUnavailable) as refused:
            asyncio.run(pool.run(core.estimate_exceedance, *args, wall_limit_s=60,
                                 cost=Cost(samples=2000), **kwargs))
        assert refused.value.kind == "worker_lost"
        assert time.monotonic() - started < 5.0  # told at once, not after the wall limit
        deadline = time.monotonic() + 60
        while pool.backend._client.status != "running" and time.monotonic() < deadline:
            time.sleep(0.2)
        again = asyncio.run(pool.run(core.estimate_exceedance, *args, wall_limit_s=60,
                                     cost=Cost(samples=2000), **kwargs))
        assert _figures(again) == _figures(core.estimate_exceedance(*args, **kwargs))
    finally:
        pool.shutdown()
