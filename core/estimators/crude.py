"""Crude Monte Carlo: the indicator of S > x, one sample set for every threshold."""

from __future__ import annotations

import numpy as np

from core.estimators.base import Group, work_per_sample
from core.portfolio import Portfolio
from core.sampling import draw_block


def plan(portfolio: Portfolio, thresholds: np.ndarray) -> list[Group]:
    x = np.asarray(thresholds, dtype=float)

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        total = draw_block(portfolio, m, rng).total
        return (total[:, None] > x[None, :]).astype(float)

    work = work_per_sample(portfolio.expected_claims, 0)
    return [Group(tuple(range(x.size)), values, work, "indicator of S > x")]
