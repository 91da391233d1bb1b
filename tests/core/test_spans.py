"""Every sample of a request is drawn by the current block runner (core.spans), pilots
included, so a split request never samples in the thread that drives it; and the figures are
those of the call without a runner, to the last bit."""

from __future__ import annotations

import dataclasses
import threading
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
import pytest

import core
from core import spans
from core.credit.model import CreditModel, group
from core.dependence.copula import Copula
from core.diagnostics import ContributionStats


class _ElsewhereRunner:
    """Runs spans in a thread of its own, as a pool would in another process."""

    width = 2

    def __init__(self) -> None:
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="runner")
        self.ident = self._pool.submit(threading.get_ident).result()
        self.samples = 0

    def __call__(self, cut: Sequence[spans.Span], /) -> list[spans.SpanResult]:
        out = list(self._pool.submit(spans.LOCAL, cut).result())
        self.samples += sum(r.samples for r in out)
        return out


def _portfolio(severity: core.Severity) -> core.Portfolio:
    return core.Portfolio(lines=[core.Line(count=core.Poisson(mean=4.0), severity=severity)])


def _credit() -> CreditModel:
    return CreditModel(groups=(
        group(count=200, exposure=1.0, default_probability=0.01, loss_given_default=0.45,
              factor_loadings=[0.4]),), factors=1)


def _dependent() -> core.Portfolio:
    return core.Portfolio(lines=[
        core.Line(count=core.Poisson(mean=3.0), severity=core.Gamma(shape=2.0, scale=1.0)),
        core.Line(count=core.Poisson(mean=2.0), severity=core.Lognormal(mu=0.0, sigma=1.0))],
        dependence=Copula(kind="gaussian", correlation=np.array([[1, .5], [.5, 1]])))


CASES: dict[str, tuple[Any, tuple[Any, ...], dict[str, Any]]] = {
    # auto pilots every candidate on the estimate's own streams (core.estimators.select).
    "exceedance auto, light tails": (
        core.estimate_exceedance, (_portfolio(core.Exponential(mean=1.0)), [12.0, 16.0]), {}),
    "exceedance auto, heavy tails": (
        core.estimate_exceedance, (_portfolio(core.Lognormal(mu=0.0, sigma=1.0)), [25.0]), {}),
    # risk measures pilot on a stream of their own, apart from the estimate.
    "risk measures auto": (core.measures.tail_estimates,
                           (_portfolio(core.Exponential(mean=1.0)),), {"levels": [0.99]}),
    # credit and dependent models choose by pilots of their own (core.credit, core.dependence).
    "credit exceedance auto": (core.estimate_exceedance, (_credit(), [6.0]), {}),
    "credit risk measures auto": (core.measures.tail_estimates, (_credit(),),
                                  {"levels": [0.99]}),
    "dependent exceedance auto": (core.estimate_exceedance, (_dependent(), [25.0]), {}),
}


@pytest.mark.parametrize("name", list(CASES))
def test_every_block_is_drawn_by_the_runner(monkeypatch, name):
    fn, args, kwargs = CASES[name]
    kwargs = {"precision": core.Precision(samples=40_000), "seed": 16, **kwargs}
    alone = fn(*args, **kwargs)
    runner = _ElsewhereRunner()
    threads: list[int] = []
    summarise = ContributionStats.from_samples.__func__  # type: ignore[attr-defined]

    def recorded(cls: type[ContributionStats], values: np.ndarray, **kw: Any
                 ) -> ContributionStats:
        threads.append(threading.get_ident())
        return summarise(cls, values, **kw)  # type: ignore[no-any-return]

    # Every block's contributions are summarised once, where the block was drawn.
    monkeypatch.setattr(ContributionStats, "from_samples", classmethod(recorded))
    with spans.using(runner):
        split = fn(*args, **kwargs)
    assert threads and set(threads) == {runner.ident}
    assert runner.samples >= 40_000
    # Same draws, same merges: the same record as without a runner, every float to the last
    # bit (repr round-trips floats exactly), the method's choice and its reason included.
    assert repr(dataclasses.replace(split, elapsed_s=0.0)) == repr(
        dataclasses.replace(alone, elapsed_s=0.0))
