"""VaR far in a heavy tail: Poisson(5) lognormal(0, 10) at 0.999, VaR about 2.4e15.

The lattice has to reach past 1e41 for the upper bound, so every claim rounds down to 0 and the
lower law's VaR is 0 (the recursion's point used to be 0.0, and Monte Carlo intervals at 1e4
samples sat wholly below the truth, marked reliable). Outside references:
- a rigorous bracket from Poisson thinning alone (bench.references.poisson_var_bracket, scipy
  only): P(S > v) >= P(some claim > v), and with claims above eps v counted separately an
  upper bound; it gives VaR in (2.365e15, 2.52e15];
- the distribution-free order-statistic interval of the empirical 0.999 quantile of 1e6 plain
  numpy draws of S (binomial ranks at 1e-4 either side; common practice), seeded.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from bench.references import poisson_var_bracket
from core import Line, Lognormal, Poisson, Portfolio, Precision
from core.measures import tail_estimates

Q = 0.999


def _book() -> Portfolio:
    return Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=10.0))])


def _bracket() -> tuple[float, float]:
    return poisson_var_bracket(5.0, stats.lognorm(10.0), Q, 1e10, 1e20)


def _quantile_interval(q: float, draws: int, seed: int) -> tuple[float, float]:
    rng = np.random.default_rng(seed)
    n = rng.poisson(5.0, draws)
    claims = rng.lognormal(0.0, 10.0, int(n.sum()))
    s = np.bincount(np.repeat(np.arange(draws), n), weights=claims, minlength=draws)
    s.sort()
    lo = int(stats.binom.ppf(1e-4, draws, q))
    hi = int(stats.binom.ppf(1.0 - 1e-4, draws, q))
    return float(s[lo - 1]), float(s[hi])


def test_recursion_var_point_stays_off_zero_and_inside_the_thinning_bracket() -> None:
    m = tail_estimates(_book(), levels=[Q], method="recursion").measures[0]
    a, b = _bracket()
    lo, hi = _quantile_interval(Q, 1_000_000, 7)
    # rigorous bounds contain the truth, so they meet both outside intervals
    assert m.var.ci_low <= b and m.var.ci_high >= a, (m.var, a, b)
    assert m.var.ci_low <= hi and m.var.ci_high >= lo, (m.var, lo, hi)
    # the largest-claim bound lifts the point into the bracket (it was 0.0)
    assert a <= m.var.value <= b, (m.var, a, b)
    assert m.var.ci_low <= m.var.value <= m.var.ci_high
    assert m.tvar.ci_low >= m.var.ci_low


@pytest.mark.parametrize("samples", [10_000, 100_000])
def test_monte_carlo_var_marked_reliable_meets_the_bracket(samples: int) -> None:
    res = tail_estimates(_book(), levels=[Q], precision=Precision(samples=samples), seed=11)
    m = res.measures[0]
    a, b = _bracket()
    if m.diagnostics.reliable:
        assert m.var.ci_high >= a and m.var.ci_low <= b, (m.var, a, b)
    else:
        assert res.warnings
