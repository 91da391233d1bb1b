"""The regime where many moderate claims add up and no single claim dominates, against an
independent deterministic computation (core.recursion: discretised n-fold convolution with
claims rounded down and up, an absorbing cell above the threshold; it shares no code path with
the Monte Carlo)."""

from __future__ import annotations

import pytest

from core import Fixed, Line, Lognormal, Portfolio, Precision
from core.exceedance import exceedance
from core.recursion import exceedance_bounds


@pytest.mark.parametrize("n, sigma", [(50, 0.5), (100, 0.25)])
def test_auto_within_recursion_bounds_at_5_and_8_sd(n, sigma):
    port = Portfolio(lines=[Line(count=Fixed(n=n), severity=Lognormal(mu=0.0, sigma=sigma))])
    xs = [port.mean + k * port.std_dev for k in (5.0, 8.0)]
    bounds = exceedance_bounds(port, xs, cells=4096)
    res = exceedance(port, xs, precision=Precision(samples=100_000), seed=12)
    for est, (lower, upper, _) in zip(res.estimates, bounds, strict=True):
        assert est.diagnostics.reliable
        assert est.relative_error <= 0.05  # the target with 1e5 samples
        # Rigorous bounds widened by 4 reported standard errors.
        assert lower - 4 * est.std_error <= est.probability <= upper + 4 * est.std_error, (
            est.probability, lower, upper)
