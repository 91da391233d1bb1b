"""Deterministic bounds for P(S > x) (core.recursion) against references outside the project.

Every check of a probability asserts lower <= exact <= upper (the bounds are rigorous), and that
the point estimate lies between them; where the reference is exact, the point estimate is also
held to an explicit relative tolerance: 5 to 50 times the error measured at the cells used (the
estimate's error falls like h^6 after the Romberg step once the grid resolves the claim law).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from core import (
    Binomial,
    Exponential,
    Fixed,
    Gamma,
    Line,
    Lognormal,
    NegativeBinomial,
    Normal,
    Poisson,
    Portfolio,
)
from core.discretise import Grid, convolve_window, discretise
from core.errors import LimitError, MethodError, ParameterError
from core.recursion import aggregate, aggregate_bounds, exceedance_bounds, iid_sum_bounds


def single(count, severity, **layer) -> Portfolio:
    return Portfolio(lines=[Line(count=count, severity=severity, **layer)])


def assert_bracketed(results, exact, rtol: float | None = None) -> None:
    # The bounds are rigorous up to floating-point rounding; where they close in on the answer
    # (one claim, a threshold at the top) they may meet the reference to its last bits, so the
    # bracket allows a relative 1e-12 for the round-off of the two computations.
    for (lower, upper, point), value in zip(results, exact, strict=True):
        assert lower <= value * (1 + 1e-12) and value * (1 - 1e-12) <= upper, (lower, value, upper)
        assert lower <= point <= upper
        if rtol is not None:
            assert point == pytest.approx(value, rel=rtol)


def poisson_gamma_mixture(mean: float, x: float, shape: float = 1.0, scale: float = 1.0,
                          extra_shape: float = 0.0) -> float:
    # Compound Poisson with gamma(shape, scale) claims: given N = n the sum is
    # gamma(n shape + extra_shape, scale) (sum of independent gammas with a common scale), so
    # P(S > x) = sum_n Poisson pmf(n) gamma(n shape + extra_shape).sf(x) exactly.
    n = np.arange(0, int(mean + 40 * math.sqrt(mean) + 200))
    shapes = n * shape + extra_shape
    sf = np.where(shapes > 0, stats.gamma.sf(x, np.maximum(shapes, 1e-300), scale=scale), 0.0)
    return math.fsum(stats.poisson.pmf(n, mean) * sf)


def count_gamma_mixture(pmf: np.ndarray, x: float, shape: float, scale: float) -> float:
    # Brute force over the count: P(S > x) = sum_n P(N = n) P(X_1 + ... + X_n > x), with the
    # n-fold sum of gamma(shape, scale) claims the gamma(n shape, scale) law (scipy.stats.gamma).
    n = np.arange(1, pmf.size)
    return math.fsum(pmf[1:] * stats.gamma.sf(x, n * shape, scale=scale))


# ---------------------------------------------------------------------------- fixed counts


def test_gamma_sum_within_bounds_out_to_1e_minus_20():
    # Reference: a sum of 20 iid gamma(2, 1) claims is gamma(40, 1) (scipy.stats.gamma).
    law = stats.gamma(40.0)
    xs = [float(v) for v in law.isf([1e-4, 1e-10, 1e-20])]
    results = iid_sum_bounds(Gamma(shape=2.0, scale=1.0), 20, xs, cells=2048)
    assert_bracketed(results, [float(law.sf(x)) for x in xs], rtol=1e-6)


def test_gamma_sum_point_estimate_holds_1e_minus_6_relative_at_1e_minus_26():
    # Reference: 30 iid gamma(4, 0.5) claims sum to gamma(120, 0.5) (scipy.stats.gamma); the
    # thresholds are its 1e-6, 1e-16 and 1e-26 upper quantiles.
    law = stats.gamma(120.0, scale=0.5)
    xs = [float(v) for v in law.isf([1e-6, 1e-16, 1e-26])]
    results = iid_sum_bounds(Gamma(shape=4.0, scale=0.5), 30, xs, cells=4096)
    assert_bracketed(results, [float(law.sf(x)) for x in xs], rtol=1e-6)


def test_within_cell_refinement_gap_shrinks_faster_than_the_span():
    # Plain rounding leaves a gap of about n h f_S(x); the refinement's gap is of order h^2
    # (plus a small sub-grid term). Reference: 30 iid gamma(4, 0.5) sum to gamma(120, 0.5).
    law = stats.gamma(120.0, scale=0.5)
    x = float(law.isf(1e-10))
    port = single(Fixed(n=30), Gamma(shape=4.0, scale=0.5))
    widths = []
    for cells in (1024, 4096):
        lower, upper, _ = exceedance_bounds(port, [x], cells=cells)[0]
        assert lower <= float(law.sf(x)) <= upper
        widths.append(upper - lower)
    grid = Grid.with_top(top=x, cells=4096)
    plain = aggregate(port, grid, "up").beyond - aggregate(port, grid, "down").beyond
    assert widths[0] / widths[1] > 6.0  # linear shrinking would give 4, quadratic 16
    assert widths[1] < 0.1 * plain


def test_binomial_with_most_trials_paid_uses_the_refinement():
    # Reference: count_gamma_mixture with scipy.stats.binom(20, 0.9) weights, gamma(2, 1) claims.
    pmf = stats.binom.pmf(np.arange(21), 20, 0.9)
    port = single(Binomial(trials=20, probability=0.9), Gamma(shape=2.0, scale=1.0))
    exact = count_gamma_mixture(pmf, 80.0, 2.0, 1.0)
    grid = Grid.with_top(top=80.0, cells=1024)
    plain = aggregate(port, grid, "up").beyond - aggregate(port, grid, "down").beyond
    (lower, upper, point), = exceedance_bounds(port, [80.0], cells=1024)
    assert_bracketed([(lower, upper, point)], [exact], rtol=1e-6)
    assert upper - lower < 0.1 * plain


def test_two_lognormal_lines_match_quadrature_of_the_convolution():
    # Reference: P(X1 + X2 > x) = P(X1 > x) + int_0^x f1(y) P(X2 > x - y) dy by
    # scipy.integrate.quad, with scipy.stats.lognorm densities and survival functions.
    first, second = stats.lognorm(1.0), stats.lognorm(0.5, scale=math.exp(0.5))
    port = Portfolio(lines=[
        Line(count=Fixed(n=1), severity=Lognormal(mu=0.0, sigma=1.0)),
        Line(count=Fixed(n=1), severity=Lognormal(mu=0.5, sigma=0.5)),
    ])
    xs = [10.0, 40.0]
    exact = []
    for x in xs:
        body, _ = integrate.quad(lambda y, x=x: first.pdf(y) * second.sf(x - y), 0.0, x,
                                 epsabs=0.0, epsrel=1e-12, limit=400, points=[1.0, 3.0])
        exact.append(float(first.sf(x)) + body)
    assert_bracketed(exceedance_bounds(port, xs, cells=2048), exact, rtol=1e-11)


def test_per_claim_limit_atom_is_placed_exactly():
    # Reference: two claims min(X, 3), X ~ exponential(1), p = P(X >= 3) = e^-3. For 3 < x < 6,
    # P(Y1 + Y2 > x) = p^2 + 2 p P(x - 3 < X < 3) + int_{x-3}^3 f(y) (F(3) - F(x - y)) dy
    # (both capped / one capped / none capped), by scipy.integrate.quad.
    law = stats.expon()
    p = float(law.sf(3.0))
    xs = [4.0, 5.5]
    exact = []
    for x in xs:
        both, _ = integrate.quad(lambda y, x=x: law.pdf(y) * (law.cdf(3.0) - law.cdf(x - y)),
                                 x - 3.0, 3.0, epsabs=0.0, epsrel=1e-13)
        exact.append(p * p + 2 * p * float(law.cdf(3.0) - law.cdf(x - 3.0)) + both)
    port = single(Fixed(n=2), Exponential(mean=1.0), limit=3.0)
    # the cap is a grid point at x = 4 but falls inside a cell at x = 5.5 (error 4e-7 measured)
    assert_bracketed(exceedance_bounds(port, xs, cells=2048), exact, rtol=5e-6)


def test_excess_of_a_normal_claim_is_non_negative_and_allowed():
    # Reference: one claim X ~ normal(10, 2) above a retention of 12 pays (X - 12)^+, so
    # P(S > y) = P(X > 12 + y) (scipy.stats.norm); only paid claims, thinned, enter the grid.
    base = stats.norm(10.0, 2.0)
    port = single(Fixed(n=1), Normal(mean=10.0, sd=2.0), retention=12.0)
    xs = [1.0, 6.0]
    exact = [float(base.sf(12.0 + y)) for y in xs]
    assert_bracketed(exceedance_bounds(port, xs, cells=512), exact, rtol=1e-12)


# ---------------------------------------------------------------------------- random counts


def test_compound_poisson_exponential_matches_poisson_mixture_of_gamma_laws():
    # Reference: poisson_gamma_mixture (exact Poisson mixture of gamma laws). Thresholds from
    # 1e-3 (Panjer's recursion) to 1e-18 (the count series, whose tail mass is exact).
    port = single(Poisson(mean=5.0), Exponential(mean=1.0))
    xs = [18.0, 35.0, 70.0]
    exact = [poisson_gamma_mixture(5.0, x) for x in xs]
    assert exact[-1] < 1e-17
    assert_bracketed(exceedance_bounds(port, xs, cells=2048), exact, rtol=1e-8)


def test_bound_width_shrinks_linearly_in_the_span():
    # Rounding moves each of the N claims by less than h, so the gap between the bounds is about
    # E[N | tail] * h * density: halving h halves it. Reference as above.
    port = single(Poisson(mean=5.0), Exponential(mean=1.0))
    x = 25.0
    exact = poisson_gamma_mixture(5.0, x)
    widths = []
    for cells in (500, 1000, 2000):
        lower, upper, _ = exceedance_bounds(port, [x], cells=cells)[0]
        assert lower <= exact <= upper
        widths.append(upper - lower)
    assert widths[0] / widths[1] == pytest.approx(2.0, rel=0.05)
    assert widths[1] / widths[2] == pytest.approx(2.0, rel=0.05)


def test_panjer_and_count_series_agree_with_the_mixture():
    # Two independent algorithms for the same lattice law (Panjer's recursion and the count
    # series), each against the exact Poisson mixture of gamma laws at a tail of about 1e-6.
    port = single(Poisson(mean=3.0), Gamma(shape=2.0, scale=1.5))
    x = 40.0
    exact = poisson_gamma_mixture(3.0, x, shape=2.0, scale=1.5)
    grid = Grid.with_top(top=x, cells=1024)
    for rounding, side in (("down", -1), ("up", 1)):
        panjer = aggregate(port, grid, rounding, exact_tail=False).beyond
        series = aggregate(port, grid, rounding, exact_tail=True).beyond
        assert side * (panjer - exact) >= 0 and side * (series - exact) >= 0
        assert panjer == pytest.approx(series, rel=1e-6)


def test_negative_binomial_counts_match_brute_force_sum_of_gamma_laws():
    # Reference: count_gamma_mixture with scipy.stats.nbinom weights (r = mean / (d - 1),
    # p = 1 / d) and exponential(2) claims; 1e-4 uses the recursion, 1e-12 the count series.
    count = NegativeBinomial(mean=4.0, dispersion=2.5)
    pmf = stats.nbinom.pmf(np.arange(400), count.r, 1.0 / 2.5)
    port = single(count, Exponential(mean=2.0))
    xs = [45.0, 150.0]
    exact = [count_gamma_mixture(pmf, x, 1.0, 2.0) for x in xs]
    assert 1e-13 < exact[1] < 1e-10
    assert_bracketed(exceedance_bounds(port, xs, cells=1024), exact, rtol=2e-7)


def test_negative_binomial_with_r_below_one():
    # r = 0.25 < 1 makes b < 0 in Panjer's recursion; the split weights stay positive.
    # Reference: count_gamma_mixture with scipy.stats.nbinom weights, gamma(3, 1) claims.
    count = NegativeBinomial(mean=0.5, dispersion=3.0)
    pmf = stats.nbinom.pmf(np.arange(300), count.r, 1.0 / 3.0)
    port = single(count, Gamma(shape=3.0, scale=1.0))
    xs = [12.0, 60.0]
    exact = [count_gamma_mixture(pmf, x, 3.0, 1.0) for x in xs]
    assert_bracketed(exceedance_bounds(port, xs, cells=1024), exact, rtol=1e-8)


def test_binomial_counts_match_brute_force_sum_of_gamma_laws():
    # Reference: count_gamma_mixture with scipy.stats.binom weights, gamma(2, 1) claims; the
    # far threshold is near 1e-15.
    pmf = stats.binom.pmf(np.arange(31), 30, 0.2)
    port = single(Binomial(trials=30, probability=0.2), Gamma(shape=2.0, scale=1.0))
    xs = [25.0, 90.0]
    exact = [count_gamma_mixture(pmf, x, 2.0, 1.0) for x in xs]
    assert exact[1] < 1e-15
    assert_bracketed(exceedance_bounds(port, xs, cells=1024), exact, rtol=1e-6)


def test_large_poisson_mean_is_split_so_the_start_does_not_underflow():
    # P(S = 0) = e^-700 is below the recursion's floor; the count is split into independent
    # parts whose laws are convolved. Reference: poisson_gamma_mixture, exponential(1) claims.
    port = single(Poisson(mean=700.0), Exponential(mean=1.0))
    x = 700.0 + 4.0 * math.sqrt(1400.0)
    exact = poisson_gamma_mixture(700.0, x)
    assert_bracketed(exceedance_bounds(port, [x], cells=16384), [exact], rtol=2e-5)


def test_large_negative_binomial_mean_is_split_too():
    # P(S = 0) = 1.5^-800 is below the recursion's floor. Reference: count_gamma_mixture with
    # scipy.stats.nbinom weights (r = 800, p = 2/3) and exponential(1) claims, at about 1e-4.
    count = NegativeBinomial(mean=400.0, dispersion=1.5)
    pmf = stats.nbinom.pmf(np.arange(3000), count.r, 1.0 / 1.5)
    port = single(count, Exponential(mean=1.0))
    x = 400.0 + 4.0 * math.sqrt(1000.0)  # Var S = E N Var X + Var N (E X)^2 = 400 + 600
    exact = count_gamma_mixture(pmf, x, 1.0, 1.0)
    assert_bracketed(exceedance_bounds(port, [x], cells=8192), [exact], rtol=2e-5)


def test_heavy_tailed_compound_poisson_bounds_are_within_a_tenth_of_a_percent():
    # A property of the bounds rather than a reference value: compound Poisson(5) with
    # lognormal(0, 1.5) claims near P = 1e-4 (threshold where 5 sf(x) = 1e-4) brackets the
    # answer to 0.1% with 20480 cells, and the estimate lies inside.
    port = single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))
    x = float(stats.lognorm(1.5).isf(2e-5))
    lower, upper, point = exceedance_bounds(port, [x], cells=20480)[0]
    assert 0.5e-4 < point < 2e-4
    assert lower <= point <= upper
    assert (upper - lower) / point <= 1e-3


def test_retention_thins_the_poisson_count():
    # Reference: exponential claims are memoryless, so above a retention r the paid claims are
    # exponential(1) again and their number is Poisson(4 e^-r): poisson_gamma_mixture.
    port = single(Poisson(mean=4.0), Exponential(mean=1.0), retention=1.5)
    xs = [8.0, 16.0]
    exact = [poisson_gamma_mixture(4.0 * math.exp(-1.5), x) for x in xs]
    assert_bracketed(exceedance_bounds(port, xs, cells=1024), exact, rtol=1e-9)


def test_lines_combine_by_convolution():
    # Reference: a compound Poisson(3) of exponential(1) claims plus an independent sum of four
    # gamma(2, 1) claims is, given N = n, gamma(n + 8, 1): poisson_gamma_mixture with extra shape.
    port = Portfolio(lines=[
        Line(count=Poisson(mean=3.0), severity=Exponential(mean=1.0)),
        Line(count=Fixed(n=4), severity=Gamma(shape=2.0, scale=1.0)),
    ])
    xs = [20.0, 45.0]
    exact = [poisson_gamma_mixture(3.0, x, extra_shape=8.0) for x in xs]
    assert_bracketed(exceedance_bounds(port, xs, cells=1024), exact, rtol=1e-8)


# ---------------------------------------------------------------------------- grids and edges


def test_aggregate_bounds_bracket_the_law_between_grid_points():
    # Reference: five gamma(3, 1) claims sum to gamma(15, 1) (scipy.stats.gamma); each law on
    # the grid is a probability law, so its masses and its tail sum to one (common practice).
    law = stats.gamma(15.0)
    bounds = aggregate_bounds(single(Fixed(n=5), Gamma(shape=3.0, scale=1.0)), 40.0, 2000)
    assert bounds.points[-1] == 40.0 and bounds.points.size == 2001
    for x in (0.0, 5.3, 15.0, 27.77, 40.0):
        lower, upper = bounds.exceedance(x)
        assert lower <= float(law.sf(x)) <= upper
    for pmf, tail in ((bounds.pmf_low, bounds.tail_low), (bounds.pmf_up, bounds.tail_up)):
        assert math.fsum(pmf) + tail == pytest.approx(1.0, abs=1e-12)
    with pytest.raises(ParameterError):
        bounds.exceedance(41.0)


def test_claim_lattices_order_the_claim_law():
    # The rounded-down law lies below the claim law and the rounded-up law above it, at every
    # grid point (scipy.stats.lognorm as the claim law).
    law = stats.lognorm(1.0)
    grid = Grid.with_top(top=20.0, cells=200)
    low = discretise(Lognormal(mu=0.0, sigma=1.0), grid, "down")
    up = discretise(Lognormal(mu=0.0, sigma=1.0), grid, "up")
    sf = law.sf(grid.points)
    assert np.all(low.survival() <= sf * (1 + 1e-12))
    assert np.all(up.survival() >= sf * (1 - 1e-12))


def test_thresholds_at_and_below_zero():
    # P(S > 0) = 1 - P(N = 0) for claims > 0 (scipy.stats.poisson); P(S > -1) = 1.
    port = single(Poisson(mean=2.0), Exponential(mean=1.0))
    (at_zero, _, _), (below, _, _) = exceedance_bounds(port, [0.0, -1.0], cells=64)
    assert at_zero == pytest.approx(float(stats.poisson.sf(0, 2.0)), rel=1e-14)
    assert below == 1.0


def test_convolve_window_matches_numpy_convolve():
    # Reference: numpy.convolve, on lengths that exercise both the small and the blocked path.
    rng = np.random.default_rng(7)
    for nx, ny, start, stop in ((5, 9, 0, 13), (700, 1500, 0, 1500), (3000, 2600, 1200, 5000)):
        x, y = rng.random(nx), rng.random(ny)
        expected = np.convolve(x, y)[start:stop]
        assert np.allclose(convolve_window(x, y, start, stop), expected, rtol=1e-13, atol=0)


# ---------------------------------------------------------------------------- errors


def test_negative_claims_raise_method_error():
    port = single(Fixed(n=3), Normal(mean=10.0, sd=1.0))
    with pytest.raises(MethodError, match="normal") as info:
        exceedance_bounds(port, [40.0])
    assert info.value.parameter == "method"


def test_too_many_cells_raise_limit_error():
    port = single(Fixed(n=3), Exponential(mean=1.0))
    with pytest.raises(LimitError) as info:
        exceedance_bounds(port, [10.0], cells=300_000)
    assert info.value.parameter == "grid"
    with pytest.raises(ParameterError):
        exceedance_bounds(port, [10.0], cells=4)
    with pytest.raises(ParameterError, match=r"thresholds\.1"):
        exceedance_bounds(port, [10.0, math.inf], cells=64)
