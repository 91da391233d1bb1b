"""Recursion VaR far in a heavy tail: the point is never below a bound that excludes it.

Poisson(5) lognormal(0, 10) at 0.999 puts its VaR near 2.4e15 while the lattice has to reach
past 1e41 for the upper bound, so every claim rounds down to 0 and the lower law's VaR is 0
(the point used to be 0.0). Outside reference: the distribution-free order-statistic interval
of the empirical 0.999 quantile of 1e6 plain numpy draws of S (binomial ranks at 1e-4 either
side; common practice), seeded and independent of the engine's code.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from core import Line, Lognormal, Poisson, Portfolio
from core.measures import tail_estimates


def _quantile_interval(q: float, draws: int, seed: int) -> tuple[float, float]:
    rng = np.random.default_rng(seed)
    n = rng.poisson(5.0, draws)
    claims = rng.lognormal(0.0, 10.0, int(n.sum()))
    s = np.bincount(np.repeat(np.arange(draws), n), weights=claims, minlength=draws)
    s.sort()
    lo = int(stats.binom.ppf(1e-4, draws, q))
    hi = int(stats.binom.ppf(1.0 - 1e-4, draws, q))
    return float(s[lo - 1]), float(s[hi])


def test_recursion_var_point_stays_off_zero_and_near_the_truth() -> None:
    q = 0.999
    port = Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=10.0))])
    m = tail_estimates(port, levels=[q], method="recursion").measures[0]
    lo, hi = _quantile_interval(q, 1_000_000, 7)
    # rigorous bounds must contain the truth, so they must meet its interval
    assert m.var.ci_low <= hi and m.var.ci_high >= lo, (m.var, lo, hi)
    # the largest-claim bound lifts the point into the interval (it was 0.0)
    assert lo <= m.var.value <= hi, (m.var, lo, hi)
    assert m.var.ci_low <= m.var.value <= m.var.ci_high
    assert m.tvar.ci_low >= m.var.ci_low
