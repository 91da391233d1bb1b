"""Crude Monte Carlo: the indicator of S > x, one sample set for every threshold."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from core.estimators.base import BlockFn, Group, work_per_sample
from core.estimators.estimator import Estimator, ModelKind, RuinRegime
from core.functionals import plain_values
from core.portfolio import Portfolio
from core.sampling import draw_block


def plan(portfolio: Portfolio, thresholds: np.ndarray) -> list[Group]:
    x = np.asarray(thresholds, dtype=float)

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        total = draw_block(portfolio, m, rng).total
        return (total[:, None] > x[None, :]).astype(float)

    work = work_per_sample(portfolio.expected_claims, 0)
    return [Group(tuple(range(x.size)), values, work, "indicator of S > x")]


class Crude(Estimator):
    name = "crude"
    listing = 10
    indicator = True
    one_sample_set = True
    ruin_infinite = RuinRegime.GEOMETRIC_SUM
    ruin_finite = RuinRegime.CRUDE_PATHS
    serves = frozenset(ModelKind)  # every model can be simulated as it is
    proposal = False

    def dependent_rank(self, amounts: int | None, *, measures: bool) -> int | None:
        return 4 if amounts is not None else 1  # the last resort there too

    def candidate_rank(self, portfolio: Portfolio) -> int | None:
        return 9  # always a candidate, and the last resort

    def plan(self, portfolio: Portfolio, thresholds: np.ndarray, seed: int, *,
             deadline: float | None = None, samples: int | None = None) -> list[Group]:
        return plan(portfolio, thresholds)

    def contributions(self, portfolio: Portfolio, points: np.ndarray, anchors: Sequence[float],
                      seed: int, *, deadline: float | None = None) -> BlockFn:
        return lambda m, rng: plain_values(draw_block(portfolio, m, rng), points)


ESTIMATOR = Crude()
