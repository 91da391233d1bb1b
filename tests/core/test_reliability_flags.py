"""Reliability verdicts on known failures and on well-behaved cases (issue: error bars a user
can trust)."""

from __future__ import annotations

from scipy import stats

from core import Fixed, Gamma, Line, Lognormal, Portfolio, Precision
from core.exceedance import exceedance
from core.recursion import exceedance_bounds


def iid(n: int, severity) -> Portfolio:
    return Portfolio(lines=[Line(count=Fixed(n=n), severity=severity)])


def test_plain_conditional_flagged_in_the_many_moderate_claims_regime():
    # Known failure (measured in the issue): plain Asmussen-Kroese for 50 lognormal(0, 0.5)
    # claims, 5 and 8 sd above the mean, misses the region where all claims are moderately
    # large; its own variance estimate cannot be trusted.
    port = iid(50, Lognormal(mu=0.0, sigma=0.5))
    xs = [port.mean + k * port.std_dev for k in (5.0, 8.0)]
    res = exceedance(port, xs, method="conditional", precision=Precision(samples=100_000),
                     seed=4)
    for est in res.estimates:
        assert not est.diagnostics.reliable, est.diagnostics
        assert est.diagnostics.pareto_k is not None and est.diagnostics.pareto_k > 0.7
    assert any("unreliable" in w for w in res.warnings)


def test_crude_with_a_handful_of_hits_is_flagged():
    # Exact: P(X > x) for one exponential claim is exp(-x); x chosen for about 5 hits in 1e5.
    port = iid(1, Gamma(shape=1.0, scale=1.0))
    x = float(stats.expon.isf(5e-5))
    est = exceedance(port, [x], method="crude", precision=Precision(samples=100_000),
                     seed=1).estimates[0]
    assert 0 < est.hits < 10
    assert not est.diagnostics.reliable


def test_conditional_for_lognormal_sum_far_out_is_not_flagged():
    # Well-behaved case: 10 lognormal(0, 1) claims, P near 1e-5, where one large claim
    # dominates; checked over 20 seeds, at most one false alarm allowed.
    port = iid(10, Lognormal(mu=0.0, sigma=1.0))
    x = float(stats.lognorm(s=1.0).isf(1e-6))
    flagged = sum(
        not exceedance(port, [x], method="conditional", precision=Precision(samples=20_000),
                       seed=s).estimates[0].diagnostics.reliable
        for s in range(20)
    )
    assert flagged <= 1


def test_tilting_a_gamma_sum_is_not_flagged():
    port = iid(20, Gamma(shape=2.0, scale=1.0))
    x = float(stats.gamma(40.0).isf(1e-10))  # sum of gammas is gamma(40, 1)
    flagged = sum(
        not exceedance(port, [x], method="tilted", precision=Precision(samples=20_000),
                       seed=s).estimates[0].diagnostics.reliable
        for s in range(10)
    )
    assert flagged == 0


def test_auto_in_the_hard_regime_is_reliable_precise_and_right():
    # The target: <= 5% relative error with 1e5 samples at 5 and 8 sd (here the
    # whole auto path, pilot included). Reference: rigorous lower and upper bounds from the
    # discretised 50-fold convolution (core.recursion, claims rounded down and up: an
    # independent deterministic method sharing no code path with the Monte Carlo).
    port = iid(50, Lognormal(mu=0.0, sigma=0.5))
    xs = [port.mean + k * port.std_dev for k in (5.0, 8.0)]
    res = exceedance(port, xs, precision=Precision(samples=100_000), seed=2)
    bounds = exceedance_bounds(port, xs, cells=4096)
    assert res.method == "conditional_is"
    for est, (lower, upper, _) in zip(res.estimates, bounds, strict=True):
        assert est.diagnostics.reliable
        assert lower - 4 * est.std_error <= est.probability <= upper + 4 * est.std_error, (
            est, lower, upper)
        assert est.relative_error <= 0.05
