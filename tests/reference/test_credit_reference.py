"""Credit portfolios against outside references: quadrature of binomial tails over the factor,
the Vasicek large-pool limit, exact convolution for independent obligors, and a 2-D quadrature
for two groups on correlated factors. Tolerances are 4 reported standard errors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from credit_references import (
    independent_lattice_pmf,
    mixed_one_factor_moments,
    mixed_one_factor_tail,
    one_factor_t_tail,
    one_factor_tail,
    two_group_tail,
    vasicek_tail,
)
from scipy import integrate, stats

from core.credit.exceedance import credit_exceedance
from core.credit.measures import credit_tail
from core.credit.model import CreditModel, group
from core.precision import Precision

N, PD, RHO, LGD = 1000, 0.01, 0.2, 0.45


def _one_factor(copula: str = "gaussian", df: float | None = None,
                n: int = N) -> CreditModel:
    return CreditModel(groups=(group(count=n, exposure=1.0, default_probability=PD,
                                     loss_given_default=LGD,
                                     factor_loadings=[math.sqrt(RHO)]),),
                       factors=1, copula=copula, df=df)


def test_one_factor_tail_matches_binomial_quadrature_at_1e4_1e6_1e8() -> None:
    # Reference: scipy.integrate.quad of scipy.stats.binom tails over the factor (exact for
    # the model). Thresholds 100, 180, 250 give P ~ 1.3e-4, 1.4e-6, 2.3e-8.
    xs = [100.0, 180.0, 250.0]
    res = credit_exceedance(_one_factor(), xs, method="glasserman_li",
                            precision=Precision(samples=100_000), seed=11)
    for x, est in zip(xs, res.estimates, strict=True):
        ref = one_factor_tail(N, PD, RHO, LGD, x)
        assert est.relative_error is not None and est.relative_error <= 0.02
        assert est.std_error is not None
        assert abs(est.value - ref) <= 4 * est.std_error, (x, est.value, ref)
        assert est.diagnostics.reliable
    assert 1e-5 < res.estimates[0].value < 1e-3
    assert 1e-9 < res.estimates[2].value < 1e-7


def test_student_t_tail_matches_two_dimensional_quadrature() -> None:
    # Reference: Gauss-Legendre in log W (chi-square 5) over scipy.integrate.quad_vec in the
    # factor of scipy.stats.binom tails; P ~ 6e-4, 3.8e-5 and 2.2e-7.
    xs = [200.0, 300.0, 400.0]
    model = _one_factor("student_t", 5.0)
    res = credit_exceedance(model, xs, method="glasserman_li",
                            precision=Precision(samples=100_000), seed=12)
    for x, est in zip(xs, res.estimates, strict=True):
        ref = one_factor_t_tail(N, PD, RHO, LGD, 5.0, x)
        assert est.relative_error is not None and est.relative_error <= 0.05
        assert est.std_error is not None
        assert abs(est.value - ref) <= 4 * est.std_error, (x, est.value, ref)


def test_large_pool_matches_vasicek_limit() -> None:
    # Reference: Vasicek (1987, 2002) limiting law of the loss fraction. With 10^6 obligors
    # the finite-pool correction (order 1/n, Gordy 2003) is far below the sampling error.
    n = 1_000_000
    y = 0.12
    ref = vasicek_tail(PD, RHO, y)  # about 2e-5
    res = credit_exceedance(_one_factor(n=n), [y * n * LGD], method="glasserman_li",
                            precision=Precision(samples=50_000), seed=13)
    est = res.estimates[0]
    assert est.std_error is not None
    assert abs(est.value - ref) <= 4 * est.std_error, (est.value, ref)


def test_zero_loadings_match_exact_convolution_of_independent_binomials() -> None:
    # Reference: the exact law of a sum of independent binomials (zero loadings), by direct
    # convolution on the lattice of exposure units (numpy.convolve of scipy.stats.binom pmfs).
    counts, units, pds = [300, 200, 100], [1, 3, 10], [0.02, 0.01, 0.005]
    lgd = 0.5
    model = CreditModel(groups=tuple(
        group(count=n, exposure=float(u), default_probability=p, loss_given_default=lgd,
              factor_loadings=[0.0]) for n, u, p in zip(counts, units, pds, strict=True)),
        factors=1)
    pmf = independent_lattice_pmf(counts, units, pds)
    xs = [30.0, 45.0]
    res = credit_exceedance(model, xs, method="glasserman_li",
                            precision=Precision(samples=50_000), seed=14)
    for x, est in zip(xs, res.estimates, strict=True):
        ref = float(pmf[np.arange(pmf.size) * lgd > x].sum())
        assert est.std_error is not None
        assert abs(est.value - ref) <= 4 * est.std_error, (x, est.value, ref)
    assert res.estimates[1].value < 1e-5


def test_two_groups_on_correlated_factors_match_dblquad() -> None:
    # Reference: scipy.integrate.dblquad over the two factors of the exact conditional law
    # (a sum over one group's binomial count of the other's binomial tail).
    corr = np.array([[1.0, 0.5], [0.5, 1.0]])
    spec = [(150, 1.0, 0.02, np.array([0.5, 0.0])), (60, 4.0, 0.005, np.array([0.1, 0.45]))]
    model = CreditModel(groups=tuple(
        group(count=n, exposure=e, default_probability=p, loss_given_default=LGD,
              factor_loadings=list(b)) for n, e, p, b in spec), factors=2, correlation=corr)
    x = 60.0
    ref = two_group_tail(spec, corr, LGD, x)
    res = credit_exceedance(model, [x], method="glasserman_li",
                            precision=Precision(samples=50_000), seed=15)
    est = res.estimates[0]
    assert est.std_error is not None
    assert abs(est.value - ref) <= 4 * est.std_error, (est.value, ref)
    assert 1e-7 < ref < 1e-4


def test_var_and_tvar_match_the_quadrature_law_and_euler_parts_sum_to_tvar() -> None:
    # Reference: the exact law of the default count, P(D = d) by scipy.integrate.quad of
    # scipy.stats.binom pmfs over the factor; VaR and TVaR (Acerbi-Tasche form) from it.
    q = 0.999
    model = CreditModel(groups=tuple(
        group(count=500, exposure=1.0, default_probability=PD, loss_given_default=LGD,
              factor_loadings=[math.sqrt(RHO)], label=name) for name in ("bonds", "loans")),
        factors=1)
    c = stats.norm.ppf(PD)
    d = np.arange(N + 1)

    def pmf_at(z: float) -> np.ndarray:
        p = stats.norm.cdf((c - math.sqrt(RHO) * z) / math.sqrt(1 - RHO))
        return np.asarray(stats.norm.pdf(z) * stats.binom.pmf(d, N, p))

    pmf = integrate.quad_vec(pmf_at, -12, 12, points=[-4, -2, 0], epsabs=1e-16,
                             epsrel=1e-10)[0]
    loss = d * LGD
    tail = 1.0 - np.cumsum(pmf)  # P(L > loss[i])
    i = int(np.argmax(tail <= 1 - q))
    var_ref = float(loss[i])
    tvar_ref = var_ref + float(np.sum(pmf * np.maximum(loss - var_ref, 0))) / (1 - q)
    res = credit_tail(model, levels=[q], method="glasserman_li",
                      precision=Precision(samples=50_000), seed=16)
    m = res.measures[0]
    # The loss lives on a lattice of step 0.45: the VaR is a lattice point and must be the
    # reference's, or at least inside its own interval.
    assert m.var.ci_low <= var_ref <= m.var.ci_high, (m.var, var_ref)
    assert abs(m.var.value / LGD - round(m.var.value / LGD)) < 1e-9
    assert m.tvar.std_error is not None
    assert abs(m.tvar.value - tvar_ref) <= 4 * m.tvar.std_error, (m.tvar, tvar_ref)
    parts = m.contributions
    assert [p.label for p in parts] == ["bonds", "loans"]
    assert sum(p.tvar_contribution for p in parts) == pytest.approx(m.tvar.value, rel=1e-12)
    # Two identical groups (a fact of symmetry): equal shares within their intervals.
    a, b = parts
    se_a, se_b = ((p.ci_high - p.ci_low) / (2 * 1.959963984540054) for p in parts)
    assert abs(a.tvar_contribution - b.tvar_contribution) <= 4 * math.hypot(se_a, se_b)


def _mixed(b: float) -> CreditModel:
    from core import Gamma, Line, Poisson
    from core.credit.lines import FactorLine

    storm = Line(count=Poisson(mean=4.0), severity=Gamma(shape=2.0, scale=5.0), label="storm")
    return CreditModel(groups=_one_factor().groups,
                       lines=(FactorLine(line=storm, factor_loadings=(b,)),), factors=1)


@pytest.mark.parametrize("b", [0.0, 0.5])
@pytest.mark.parametrize("x", [150.0, 250.0])
def test_mixed_book_matches_quadrature_over_the_factor(b: float, x: float) -> None:
    # Reference: credit_references.mixed_one_factor_tail, binomial defaults given the factor
    # and the Poisson-gamma line's exact compound law (a series of scipy gamma tails) mapped
    # through its latent normal, integrated over the factor by scipy.integrate.quad; with
    # b = 0 it is the convolution of the credit loss law with the independent compound law.
    # P is near 1e-3 and 1e-6 (b = 0) and 4e-3 and 3e-5 (b = 0.5: claims rise with defaults).
    ref = mixed_one_factor_tail(N, PD, RHO, LGD, 4.0, 2.0, 5.0, b, x)
    e = credit_exceedance(_mixed(b), [x], precision=Precision(samples=40_000),
                          seed=5).estimates[0]
    assert e.std_error is not None and e.diagnostics.reliable, e.diagnostics.reason
    assert abs(e.value - ref) <= 4 * e.std_error, (e.value, ref, e.std_error)
    assert e.ci_low <= e.value <= e.ci_high


def test_mixed_book_crude_matches_quadrature_and_zero_loadings_give_the_moments() -> None:
    # Reference: as above (crude Monte Carlo, the indicator's exact binomial interval); the
    # standard deviation of an independent line beside the credit loss is the root of the sum
    # of the variances (the credit loss's by the bivariate-normal formula, the line's by the
    # compound formula E N Var X + Var N (E X)^2).
    ref = mixed_one_factor_tail(N, PD, RHO, LGD, 4.0, 2.0, 5.0, 0.0, 100.0)
    res = credit_exceedance(_mixed(0.0), [100.0], method="crude",
                            precision=Precision(samples=40_000), seed=5)
    e = res.estimates[0]
    assert e.std_error is not None and abs(e.value - ref) <= 4 * e.std_error
    credit = credit_exceedance(_one_factor(), [100.0], precision=Precision(samples=500),
                               seed=5)
    line_var = 4.0 * 2.0 * 25.0 + 4.0 * 100.0  # E N Var X + Var N (E X)^2
    assert abs(res.std_dev - math.sqrt(credit.std_dev**2 + line_var)) <= 1e-9 * res.std_dev
    assert abs(res.mean - (4.5 + 40.0)) <= 1e-9


def test_mixed_book_var_matches_quadrature_and_parts_sum_to_tvar() -> None:
    # Reference: the 0.99 quantile of the quadrature law above (scipy.optimize.brentq on
    # mixed_one_factor_tail); the Euler parts (group and line) sum to TVaR (full allocation).
    from scipy import optimize

    model = _mixed(0.5)
    ref = optimize.brentq(lambda v: mixed_one_factor_tail(N, PD, RHO, LGD, 4.0, 2.0, 5.0,
                                                          0.5, v) - 0.01, 60.0, 300.0,
                          xtol=1e-6)
    res = credit_tail(model, levels=[0.99], precision=Precision(samples=40_000), seed=6)
    m = res.measures[0]
    half = 0.5 * (m.var.ci_high - m.var.ci_low)
    assert m.diagnostics.reliable
    assert abs(m.var.value - ref) <= 2.0 * half, (m.var, ref)  # 2 half-widths = 4 SE
    labels = [c.label for c in m.contributions]
    assert len(labels) == 2 and labels[1] == "storm"
    total = sum(c.tvar_contribution for c in m.contributions)
    assert abs(total - m.tvar.value) <= 1e-12 * m.tvar.value


@pytest.mark.parametrize("b", [0.5, -0.7])
def test_mixed_book_std_dev_matches_one_factor_quadrature(b: float) -> None:
    # Reference: credit_references.mixed_one_factor_moments, E[(L + S)^2] by conditioning on
    # the factor (binomial defaults, the line's exact compound law through its latent normal;
    # scipy.integrate). Tolerance 1e-3 relative: the level to which the engine's quadrature
    # must first reproduce each line's own moments (core.dependence.moments.REPRODUCE). The
    # covariance with the defaults moves the sd by +10% (b = 0.5) and -13% (b = -0.7) from
    # the independent 25.50, so a missing or mis-signed covariance fails.
    from core.credit.moments import loss_moments

    ref_mean, ref_sd = mixed_one_factor_moments(N, PD, RHO, LGD, 4.0, 2.0, 5.0, b)
    res = credit_tail(_mixed(b), levels=[0.99], precision=Precision(samples=2000), seed=6)
    assert abs(res.mean - ref_mean) <= 1e-9 * ref_mean
    assert abs(res.std_dev - ref_sd) <= 1e-3 * ref_sd, (res.std_dev, ref_sd)
    assert loss_moments(_mixed(b))[1] == res.std_dev  # exceedance reports the same figure


def test_mixed_book_std_dev_under_student_t_matches_direct_simulation() -> None:
    # Reference: the sample sd of the model simulated directly with numpy and scipy alone
    # (factor, chi-square mixing, binomial defaults given them, the line's exact gamma quantile
    # at its t-copula uniform; one amount, so no lattice), within 4 of its standard errors
    # (delta method: SE = sqrt(m4 - s^4) / (2 s sqrt(n))); fixed seed.
    from core import Fixed, Gamma, Line
    from core.credit.lines import FactorLine
    from core.credit.moments import loss_moments

    df, b, n_sim = 5.0, 0.6, 400_000
    amount = Line(count=Fixed(n=1), severity=Gamma(shape=2.0, scale=20.0), label="large loss")
    model = CreditModel(groups=_one_factor("student_t", df).groups,
                        lines=(FactorLine(line=amount, factor_loadings=(b,)),), factors=1,
                        copula="student_t", df=df)
    mean, sd = loss_moments(model)
    rng = np.random.default_rng(15)
    z, e = rng.standard_normal(n_sim), rng.standard_normal(n_sim)
    s = np.sqrt(rng.chisquare(df, n_sim) / df)
    p = stats.norm.cdf((stats.t.ppf(PD, df) * s - math.sqrt(RHO) * z) / math.sqrt(1 - RHO))
    loss = rng.binomial(N, p) * LGD + stats.gamma(2.0, scale=20.0).isf(
        stats.t.cdf((b * z + math.sqrt(1 - b * b) * e) / s, df))
    sd_sim = float(loss.std())
    se = math.sqrt(float(np.mean((loss - loss.mean()) ** 4)) - sd_sim**4) / (
        2 * sd_sim * math.sqrt(n_sim))
    assert abs(sd - sd_sim) <= 4 * se, (sd, sd_sim, se)
    assert abs(mean - (N * PD * LGD + 40.0)) <= 1e-9 * mean
