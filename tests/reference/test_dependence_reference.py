"""Dependent portfolios against references the project did not make (named beside each check).

Tolerances: |estimate - reference| <= 4 standard errors (plus the reference's own bound width
where it has one)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, signal, stats

from core import Fixed, Gamma, Line, Lognormal, Poisson, Portfolio, Precision
from core import estimate_exceedance as exceedance
from core.dependence.copula import Copula
from core.errors import MethodError
from core.measures import tail_estimates


def _amounts(mu: list[float], sigma: list[float], r: np.ndarray) -> Portfolio:
    lines = [Line(count=Fixed(n=1), severity=Lognormal(mu=m, sigma=s), label=f"a{i}")
             for i, (m, s) in enumerate(zip(mu, sigma, strict=True))]
    return Portfolio(lines=lines, dependence=Copula(kind="gaussian", correlation=r))


def _within(est: object, ref: float, slack: float = 0.0) -> None:
    e = est  # an ExceedanceEstimate
    assert e.std_error is not None  # type: ignore[attr-defined]
    assert abs(e.value - ref) <= 4 * e.std_error + slack, (e.value, ref, e.std_error)  # type: ignore[attr-defined]


def _two_lognormals_quad(rho: float, s1: float, s2: float, x: float) -> float:
    # Condition on Z1: Z2 | Z1 ~ N(rho Z1, 1 - rho^2); P(X2 > x - X1 | Z1) is a normal tail.
    sd = math.sqrt(1 - rho * rho)

    def f(z1: float) -> float:
        rest = x - math.exp(s1 * z1)
        if rest <= 0:
            return float(stats.norm.pdf(z1))
        return float(stats.norm.pdf(z1) * stats.norm.sf((math.log(rest) / s2 - rho * z1) / sd))

    z_top = math.log(x) / s1
    # split at the point where X1 alone reaches x (the integrand has a kink there)
    a = integrate.quad(f, -12, z_top, limit=200, epsabs=0, epsrel=1e-10)[0]
    b = float(stats.norm.sf(z_top))
    return a + b


@pytest.mark.parametrize("method", ["conditional_is", "conditional", "radial", "mean_shift"])
def test_two_correlated_lognormals_match_quadrature(method: str) -> None:
    # Reference: one-dimensional quadrature after conditioning on one normal (scipy.integrate).
    r = np.array([[1.0, 0.7], [0.7, 1.0]])
    pf = _amounts([0.0, 0.0], [1.0, 0.6], r)
    x = 120.0
    ref = _two_lognormals_quad(0.7, 1.0, 0.6, x)
    res = exceedance(pf, [x], method=method, precision=Precision(samples=20_000), seed=3)
    _within(res.estimates[0], ref)


def test_comonotone_lognormal_sum_matches_one_dimensional_root() -> None:
    # All correlations 1: S = sum exp(mu_i + sigma_i Z) with one Z, so P(S > x) = Phi(-z*)
    # with z* the root of that increasing function (scipy.optimize.brentq).
    mu, sigma = [0.0, 0.5, -0.3], [1.0, 0.6, 1.3]
    pf = _amounts(mu, sigma, np.ones((3, 3)))
    x = 400.0
    z = optimize.brentq(lambda t: sum(math.exp(m + s * t) for m, s in zip(mu, sigma, strict=True))
                        - x, -10, 20)
    res = exceedance(pf, [x], method="mean_shift", precision=Precision(samples=20_000), seed=4)
    _within(res.estimates[0], float(stats.norm.sf(z)))
    res = exceedance(pf, [x], precision=Precision(samples=20_000), seed=4)
    _within(res.estimates[0], float(stats.norm.sf(z)))


def test_comonotone_var_is_the_sum_of_line_vars() -> None:
    # VaR is additive for comonotone risks (Dhaene, Denuit, Goovaerts, Kaas and Vyncke 2002):
    # VaR_q(S) = sum exp(mu_i + sigma_i Phi^{-1}(q)).
    mu, sigma = [0.0, 0.5], [1.0, 0.6]
    pf = _amounts(mu, sigma, np.ones((2, 2)))
    q = 0.995
    ref = sum(math.exp(m + s * stats.norm.ppf(q)) for m, s in zip(mu, sigma, strict=True))
    res = tail_estimates(pf, levels=[q], method="mean_shift", precision=Precision(samples=20_000),
                         seed=5)
    var = res.measures[0].var
    # the 95% interval is about +-1.96 SE: allow twice its half-width (about 4 SE)
    half = 0.5 * (var.ci_high - var.ci_low)
    assert abs(var.value - ref) <= 2 * half + 1e-9 * ref, (var, ref)


def _iid_tail(a: float, s: float, n: int, x: float, rounding: str, cells: int = 8192) -> float:
    """P(sum of n iid lognormal(a, s) > x) on a lattice, claims rounded down or up: a lower or
    upper bound (numerical convolution with the mass beyond x dropped at each step)."""
    h = x / cells
    edges = np.arange(cells + 1) * h
    cdf = stats.lognorm.cdf(edges, s, scale=math.exp(a))
    mass = np.diff(cdf)  # mass of ((k-1)h, kh], k = 1..cells
    pmf = np.zeros(cells + 1)
    if rounding == "up":
        pmf[1:] = mass
    else:
        pmf[:-1] = mass
    out = np.zeros(cells + 1)
    out[0] = 1.0
    for _ in range(n):
        out = np.maximum(signal.fftconvolve(out, pmf)[: cells + 1], 0.0)
    return float(max(1.0 - out.sum(), 0.0))


def test_equicorrelated_lognormals_match_common_factor_convolution() -> None:
    # Reference: condition on the common factor V (Y_i = sqrt(rho) V + sqrt(1 - rho) e_i),
    # then the iid sum by numerical convolution with rounding down / up (an independent
    # deterministic method), integrated over V by the trapezoid rule.
    d, rho, x = 10, 0.5, 1000.0
    r = np.full((d, d), rho)
    np.fill_diagonal(r, 1.0)
    pf = _amounts([0.0] * d, [1.0] * d, r)
    v = np.linspace(-6.0, 7.0, 131)
    bounds = []
    for rounding in ("down", "up"):
        tail = np.array([_iid_tail(math.sqrt(rho) * t, math.sqrt(1 - rho), d, x, rounding)
                         for t in v])
        bounds.append(float(np.trapezoid(stats.norm.pdf(v) * tail, v)))
    lo, hi = bounds
    res = exceedance(pf, [x], precision=Precision(samples=20_000), seed=6)
    e = res.estimates[0]
    assert e.std_error is not None
    assert lo - 4 * e.std_error <= e.value <= hi + 4 * e.std_error, (e.value, lo, hi)


def test_unequal_one_factor_lognormals_match_factor_convolution() -> None:
    # Reference: a one-factor matrix with unequal loadings (valid, not equicorrelated):
    # condition on the factor, convolve the independent amounts numerically with claims
    # rounded down / up (an independent deterministic method, bench.dependence), integrate
    # over the factor by the trapezoid rule. P is near 1e-7, where the allocation of samples
    # among the pieces and the shared design-point shifts matter.
    from bench.dependence import factor_reference

    b = np.array([0.3, 0.45, 0.6, 0.7, 0.8, 0.9])
    r = np.outer(b, b)
    np.fill_diagonal(r, 1.0)
    pf = _amounts([0.0] * 6, [1.0] * 6, r)
    lo, hi = factor_reference(b, 1.0, 400.0, cells=8192)
    e = exceedance(pf, [400.0], precision=Precision(samples=20_000), seed=6,
                   method="conditional_is").estimates[0]
    assert e.std_error is not None and e.diagnostics.reliable
    assert lo - 4 * e.std_error <= e.value <= hi + 4 * e.std_error, (e.value, lo, hi)


def _two_lines() -> list[Line]:
    return [Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=1.5), label="storm"),
            Line(count=Poisson(mean=20.0), severity=Gamma(shape=2.0, scale=1.0), label="motor")]


def test_identity_copula_reproduces_the_independent_engine() -> None:
    # The independent engine (tested against closed forms elsewhere) is the reference here.
    lines = _two_lines()
    x = [150.0]
    ind = exceedance(Portfolio(lines=lines), x, precision=Precision(samples=20_000), seed=7)
    dep = exceedance(Portfolio(lines=lines, dependence=Copula(kind="gaussian",
                                                               correlation=np.eye(2))),
                     x, precision=Precision(samples=20_000), seed=7)
    a, b = ind.estimates[0], dep.estimates[0]
    assert a.std_error is not None and b.std_error is not None
    # the grid bounds of the dependent estimate widen the allowance
    grid = 0.5 * max(b.ci_high - b.ci_low - 2 * 1.96 * b.std_error, 0.0)
    assert abs(a.value - b.value) <= 4 * math.hypot(a.std_error, b.std_error) + grid


def test_euler_contributions_sum_to_tvar() -> None:
    # Euler allocation is full allocation: sum_i E[S_i | S > VaR] = TVaR (common practice).
    pf = Portfolio(lines=_two_lines(), dependence=Copula(
        kind="gaussian", correlation=np.array([[1.0, 0.6], [0.6, 1.0]])))
    res = tail_estimates(pf, levels=[0.99], precision=Precision(samples=10_000), seed=8)
    m = res.measures[0]
    total = sum(c.tvar_contribution for c in m.contributions)
    assert abs(total - m.tvar.value) <= 1e-12 * m.tvar.value
    assert [c.label for c in m.contributions] == ["storm", "motor"]
    assert all(c.ci_low <= c.tvar_contribution <= c.ci_high for c in m.contributions)


def test_recursion_refuses_a_dependent_portfolio() -> None:
    pf = _amounts([0.0, 0.0], [1.0, 1.0], np.eye(2))
    with pytest.raises(MethodError) as info:
        exceedance(pf, [10.0], method="recursion")
    assert info.value.parameter == "method"
    with pytest.raises(MethodError):
        tail_estimates(pf, levels=[0.99], method="recursion")


@pytest.mark.parametrize("method", ["conditional", "conditional_is", "radial"])
def test_amount_only_methods_refuse_copula_coupled_lines(method: str) -> None:
    # These samplers exist only for correlated lognormal amounts (ABJR 2011, directional,
    # Kortschak-Hashorva 2013); on compound lines they once ran mean_shift under their name.
    lines = [Line(count=Poisson(mean=2.0), severity=Gamma(shape=2.0, scale=1.0)),
             Line(count=Poisson(mean=3.0), severity=Gamma(shape=1.0, scale=2.0))]
    pf = Portfolio(lines=lines, dependence=Copula(kind="gaussian",
                                                   correlation=np.array([[1, 0.5], [0.5, 1]])))
    for call in (lambda: exceedance(pf, [30.0], method=method),
                 lambda: tail_estimates(pf, levels=[0.99], method=method)):
        with pytest.raises(MethodError) as info:
            call()
        assert info.value.parameter == "method"
        assert "auto, crude, mean_shift" in str(info.value) and method in str(info.value)
    # the same method on lognormal amounts under a gaussian copula is served, and says so
    res = exceedance(_amounts([0.0, 0.0], [1.0, 1.0], np.array([[1, 0.5], [0.5, 1]])), [30.0],
                     method=method, precision=Precision(samples=2000), seed=3)
    assert res.method == method


def test_student_t_copula_two_lognormals_match_quadrature() -> None:
    # Reference: for a bivariate t (df nu, correlation rho), T2 | T1 = t is rho t plus
    # sqrt((nu + t^2)(1 - rho^2) / (nu + 1)) times a t with nu + 1 degrees of freedom (the
    # conditional law of the multivariate t); one-dimensional quadrature over T1 (scipy).
    nu, rho, x = 4.0, 0.6, 200.0
    law1, law2 = stats.lognorm(1.0), stats.lognorm(0.8)

    def f(t: float) -> float:
        rest = x - float(law1.ppf(stats.t.cdf(t, nu)))
        if rest <= 0:
            return float(stats.t.pdf(t, nu))
        c = float(stats.t.isf(law2.sf(rest), nu))
        scale = math.sqrt((nu + t * t) * (1 - rho * rho) / (nu + 1))
        return float(stats.t.pdf(t, nu) * stats.t.sf((c - rho * t) / scale, nu + 1))

    t_top = float(stats.t.isf(law1.sf(x), nu))
    ref = integrate.quad(f, -60, t_top, limit=400, epsrel=1e-10)[0] + float(
        stats.t.sf(t_top, nu))
    lines = [Line(count=Fixed(n=1), severity=Lognormal(mu=0.0, sigma=1.0)),
             Line(count=Fixed(n=1), severity=Lognormal(mu=0.0, sigma=0.8))]
    pf = Portfolio(lines=lines, dependence=Copula(
        kind="student_t", correlation=np.array([[1.0, rho], [rho, 1.0]]), df=nu))
    res = exceedance(pf, [x], precision=Precision(samples=20_000), seed=9)
    assert res.method == "mean_shift"
    _within(res.estimates[0], ref)


def test_dependent_std_dev_of_two_gamma_amounts_matches_scipy_quadrature() -> None:
    # Reference: Cov(X1, X2) = E[q1(Phi(Z1)) q2(Phi(Z2))] - E X1 E X2 for a bivariate normal
    # (Z1, Z2) with correlation 0.6, by Simpson's rule in both axes (scipy.integrate.simpson)
    # over [-8, 8]^2 against scipy.stats.multivariate_normal's density, with scipy.stats.gamma's
    # quantiles (exact marginals; no lattice), and Var of each gamma.
    rho = 0.6
    laws = [stats.gamma(2.0, scale=3.0), stats.gamma(0.7, scale=10.0)]
    z = np.linspace(-8.0, 8.0, 2001)
    z1, z2 = np.meshgrid(z, z, indexing="ij")
    density = stats.multivariate_normal(cov=[[1, rho], [rho, 1]]).pdf(np.dstack([z1, z2]))
    product = np.outer(laws[0].isf(stats.norm.sf(z)), laws[1].isf(stats.norm.sf(z)))
    cov = float(integrate.simpson(integrate.simpson(product * density, x=z, axis=1), x=z)
                - laws[0].mean() * laws[1].mean())
    ref = math.sqrt(laws[0].var() + laws[1].var() + 2.0 * cov)
    lines = [Line(count=Fixed(n=1), severity=Gamma(shape=2.0, scale=3.0)),
             Line(count=Fixed(n=1), severity=Gamma(shape=0.7, scale=10.0))]
    pf = Portfolio(lines=lines, dependence=Copula(kind="gaussian",
                                                  correlation=np.array([[1, rho], [rho, 1]])))
    res = exceedance(pf, [60.0], precision=Precision(samples=2_000), seed=3)
    assert abs(res.std_dev - ref) <= 1e-4 * ref, (res.std_dev, ref)


def test_dependent_std_dev_of_compound_lines_identity_is_the_compound_formula() -> None:
    # Reference: with the identity correlation the lines are independent, so Var S is the sum
    # of the compound variances E[N] Var X + Var N (E X)^2 (a closed form).
    lines = _two_lines()
    pf = Portfolio(lines=lines, dependence=Copula(kind="gaussian", correlation=np.eye(2)))
    ref = math.sqrt(sum(line.variance for line in lines))
    res = exceedance(pf, [150.0], precision=Precision(samples=2_000), seed=3)
    assert abs(res.std_dev - ref) <= 1e-3 * ref, (res.std_dev, ref)
    tail = tail_estimates(pf, levels=[0.99], precision=Precision(samples=2_000), seed=3)
    assert abs(tail.std_dev - ref) <= 1e-3 * ref, (tail.std_dev, ref)


def test_dependent_compound_std_dev_exceeds_the_independent_one_and_matches_sampling() -> None:
    # Reference: the sample standard deviation of crude draws of (S_1, S_2) by the copula
    # (independent of the quadrature; the lattice quantiles are shared, so this checks the
    # quadrature), within 4 of its standard errors (the standard error of
    # a sample variance, sqrt((m4 - s^4) / n), by the delta method for s).
    from core.dependence.coupled import Coupled
    from core.dependence.marginals import line_quantiles

    pf = Portfolio(lines=_two_lines(), dependence=Copula(
        kind="gaussian", correlation=np.array([[1.0, 0.6], [0.6, 1.0]])))
    sd = exceedance(pf, [400.0], precision=Precision(samples=2_000), seed=3).std_dev
    model = Coupled(pf.dependence, tuple(line_quantiles(pf, 1e-12)))  # type: ignore[arg-type]
    rng = np.random.default_rng(11)
    n = 400_000
    lo, up = model.losses(rng.standard_normal((n, 2)), np.ones(n))
    s = np.where(np.isfinite(up), 0.5 * (lo + up), lo).sum(axis=1)
    c = s - s.mean()
    var = float(np.mean(c**2))
    se_sd = math.sqrt((float(np.mean(c**4)) - var**2) / n) / (2.0 * math.sqrt(var))
    assert sd > 1.1 * Portfolio(lines=_two_lines()).std_dev
    assert abs(sd - math.sqrt(var)) <= 4 * se_sd, (sd, math.sqrt(var), se_sd)


@pytest.mark.parametrize("top", [None, 250.0])
def test_lattice_quantile_bounds_bracket_the_exact_compound_quantile(top: float | None) -> None:
    # Reference: the exact Poisson(4) gamma(2, 5) law, P(S > y) as the series over the claim
    # count of scipy gamma tails (credit_references.poisson_gamma_sf). For every upper-tail
    # uniform the lattice's lower and upper quantiles must bracket F^{-1}(1 - ubar):
    # sf(lower) >= ubar >= sf(upper). top = 250 is an exceedance-only request's lattice set
    # (no fill lattices, reach just past the threshold), None a risk-measure request's.
    from credit_references import poisson_gamma_sf

    from core.dependence.marginals import line_quantiles

    line = Line(count=Poisson(mean=4.0), severity=Gamma(shape=2.0, scale=5.0))
    pf = Portfolio(lines=[line, line], dependence=Copula(kind="gaussian",
                                                         correlation=np.eye(2)))
    q = line_quantiles(pf, 1e-12, top)[0]
    ubar = np.logspace(-12, 0, 400)[:-1]
    lo, hi = q.bounds(ubar)
    assert np.all(lo <= hi)
    sf_lo = poisson_gamma_sf(4.0, 2.0, 5.0, lo)
    assert np.all(sf_lo >= ubar * (1 - 1e-9)), ubar[sf_lo < ubar][:3]
    finite = np.isfinite(hi)
    assert np.all(poisson_gamma_sf(4.0, 2.0, 5.0, hi[finite]) <= ubar[finite] * (1 + 1e-9))
    if top is not None:  # beyond the reach the upper bound says so by being infinite
        assert not np.all(finite) and np.all(lo[~finite] >= 0.99 * top)
