"""Block-parallel requests: one request split into span tasks over the workers gives the same
figures to the last bit as the whole call in one process (core.spans, service.executor)."""

from __future__ import annotations

import asyncio
import dataclasses
from typing import Any

import numpy as np
import pytest

import core
from core import measures, spans
from service.executor import ComputePool, Cost
from service.metrics import Metrics

SAMPLES = 120_000  # about 15 blocks of 8192 samples: several spans per worker


def _portfolio() -> core.Portfolio:
    return core.Portfolio(lines=[
        core.Line(count=core.Poisson(mean=3.0), severity=core.Lognormal(mu=0.0, sigma=1.2)),
        core.Line(count=core.Fixed(n=2), severity=core.Gamma(shape=2.0, scale=1.5)),
    ])


CALLS: dict[str, tuple[Any, tuple[Any, ...], dict[str, Any]]] = {
    "exceedance, conditional": (core.estimate_exceedance, (_portfolio(), [40.0, 80.0]),
                                {"method": "conditional"}),
    # auto's pilots go out as spans too, and the chosen method continues its own pilot.
    "exceedance, auto": (core.estimate_exceedance, (_portfolio(), [40.0, 80.0]), {}),
    "exceedance, run until a relative error": (
        core.estimate_exceedance, (_portfolio(), [30.0]),
        {"method": "crude", "precision": core.Precision(relative_error=0.05,
                                                        max_samples=SAMPLES)}),
    "risk measures": (measures.tail_estimates, (_portfolio(),),
                      {"levels": [0.99, 0.995], "method": "crude"}),
}


def _figures(result: Any) -> list[Any]:
    # Every float of the result record, NaN-safe, as exact bit patterns.
    return [np.float64(v).tobytes() if isinstance(v, float) else v
            for v in _flatten(dataclasses.asdict(result))]


def _flatten(value: Any) -> list[Any]:
    if isinstance(value, dict):
        return [x for k in sorted(value) if k != "elapsed_s" for x in _flatten(value[k])]
    if isinstance(value, list | tuple):
        return [x for v in value for x in _flatten(v)]
    return [value]


def _split_run(pool: ComputePool, fn: Any, args: tuple[Any, ...], kwargs: dict[str, Any]
               ) -> Any:
    kwargs = {"precision": core.Precision(samples=SAMPLES), "seed": 2026, **kwargs}
    return asyncio.run(pool.run(fn, *args, wall_limit_s=120,
                                cost=Cost(samples=SAMPLES, per_sample=5.0, split=True),
                                **kwargs))


@pytest.fixture(scope="module")
def pools():
    made = {}
    for workers in (1, 2):
        pool = ComputePool(kind="process", workers=workers, metrics=Metrics())
        pool.start()
        made[workers] = pool
    yield made
    for pool in made.values():
        pool.shutdown()


@pytest.mark.parametrize("name", list(CALLS))
def test_one_and_two_workers_give_the_same_figures_to_the_last_bit(pools, name):
    fn, args, kwargs = CALLS[name]
    alone = fn(*args, **{"precision": core.Precision(samples=SAMPLES), "seed": 2026, **kwargs})
    one = _split_run(pools[1], fn, args, kwargs)
    before = pools[2].scheduler.spans_started
    two = _split_run(pools[2], fn, args, kwargs)
    assert pools[2].scheduler.spans_started - before >= 2  # the blocks did go out in spans
    assert _figures(one) == _figures(alone)
    assert _figures(two) == _figures(alone)
    assert pools[2].in_flight == 0


def test_spans_cut_anywhere_merge_to_the_same_statistics():
    # The cut depends on the runner's width; the merged statistics must not.
    group = core.estimators.registry.get("crude").plan(_portfolio(), np.array([20.0]), 1)[0]
    stream = core.streams.Stream(core.streams.Purpose.SAMPLES, "crude")
    plan = list(core.sampling.blocks(20 * 512, 512))
    merged = []
    for width in (1, 2, 3, 7):
        cut = spans.cut(group, stream, 5, plan, top_k=64, width=width, deadline=None)
        results = spans.LOCAL(cut)
        stats = core.diagnostics.ContributionStats.combine([r.stats for r in results])
        merged.append((stats.mean().tobytes(), stats.std_error().tobytes(), stats.n))
    assert len({m for m in merged}) == 1
