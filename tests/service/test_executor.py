"""The process pool: core objects cross the process boundary, and so do core errors."""

from __future__ import annotations

import asyncio
import pickle
import time

import pytest

import core
from core.errors import ParameterError
from service.errors import ComputationUnavailable
from service.executor import ComputePool
from service.metrics import Metrics


def _portfolio() -> core.Portfolio:
    return core.Portfolio(lines=[
        core.Line(count=core.Poisson(mean=3.0), severity=core.Gamma(shape=2.0, scale=5.0),
                  retention=1.0, limit=40.0, label="a"),
        core.Line(count=core.Fixed(n=2), severity=core.Lognormal(mu=1.0, sigma=0.8)),
    ])


def test_core_models_survive_pickling():
    portfolio = _portfolio()
    again = pickle.loads(pickle.dumps(portfolio))
    assert again == portfolio
    assert again.mean == portfolio.mean


@pytest.fixture(scope="module")
def process_pool():
    pool = ComputePool(kind="process", workers=2, metrics=Metrics())
    pool.start()
    yield pool
    pool.shutdown()


def test_process_and_thread_pools_give_the_same_figures(process_pool):
    args = (_portfolio(), [30.0, 60.0])
    kwargs = {"precision": core.Precision(samples=2000), "seed": 8, "method": "crude"}
    estimate = core.estimate_exceedance
    threads = ComputePool(kind="thread", workers=1, metrics=Metrics())
    threads.start()
    try:
        in_thread = asyncio.run(threads.run(estimate, *args, wall_limit_s=30, **kwargs))
    finally:
        threads.shutdown()
    in_process = asyncio.run(process_pool.run(estimate, *args, wall_limit_s=30, **kwargs))
    assert in_process.estimates == in_thread.estimates
    assert process_pool.in_flight == 0


def test_core_error_in_a_worker_process_is_raised_again_in_the_server(process_pool):
    # TailgaugeError takes two constructor arguments, which plain exception pickling loses.
    with pytest.raises(ParameterError) as raised:
        asyncio.run(process_pool.run(core.Precision, wall_limit_s=30, relative_error=2.0))
    assert raised.value.parameter == "precision.relative_error"
    assert "(0, 1)" in raised.value.message


def test_waiting_stops_at_the_wall_limit_and_the_gauge_follows_the_work():
    metrics = Metrics()
    pool = ComputePool(kind="thread", workers=1, metrics=metrics)
    pool.start()
    try:
        started = time.perf_counter()
        with pytest.raises(ComputationUnavailable) as raised:
            asyncio.run(pool.run(time.sleep, 0.5, wall_limit_s=0.1))
        assert time.perf_counter() - started < 0.4
        assert raised.value.kind == "time_limit"
        assert pool.in_flight == 1  # the work itself is still running
        time.sleep(0.6)
        assert pool.in_flight == 0
        assert metrics.in_flight._value.get() == 0
    finally:
        pool.shutdown()
