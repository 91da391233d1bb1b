"""VaR, TVaR and layer losses against references from outside the project."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from core import Exponential, Fixed, Gamma, Line, Lognormal, Normal, Poisson, Portfolio, Precision
from core.measures import Layer, tail_estimates

LEVELS = [0.99, 0.995, 0.999, 0.9999]


def single(count, severity) -> Portfolio:
    return Portfolio(lines=[Line(count=count, severity=severity)])


def covers(interval, exact: float, k: float = 4.0) -> bool:
    """Within k standard errors, the standard error read off the 95% interval (half-width /
    1.96): several checks per test, so 4 rather than the interval itself."""
    se = max(interval.value - interval.ci_low, interval.ci_high - interval.value) / 1.96
    return abs(interval.value - exact) <= k * se


def test_gamma_sum_var_and_tvar_match_the_gamma_law():
    # Reference: 20 iid gamma(2, 1) claims sum to gamma(40, 1) (scipy.stats.gamma); its TVaR
    # is E[S; S > v] / (1 - q) with E[S; S > v] = 40 * gamma(41).sf(v) (closed form).
    port = single(Fixed(n=20), Gamma(shape=2.0, scale=1.0))
    res = tail_estimates(port, levels=LEVELS, precision=Precision(samples=50_000), seed=3)
    law = stats.gamma(40.0)
    for m in res.measures:
        v = float(law.ppf(m.level))
        tvar = 40.0 * float(stats.gamma(41.0).sf(v)) / (1.0 - m.level)
        assert covers(m.var, v), (m.level, m.var, v)
        assert covers(m.tvar, tvar), (m.level, m.tvar, tvar)
        assert m.tvar.value >= m.var.value


def test_normal_loss_var_and_tvar_match_closed_forms():
    # Reference: N(1, 2^2): VaR = 1 + 2 z_q (scipy.stats.norm), TVaR = 1 + 2 phi(z_q)/(1 - q)
    # (closed form of the normal expected shortfall).
    port = single(Fixed(n=1), Normal(mean=1.0, sd=2.0))
    res = tail_estimates(port, levels=LEVELS, method="tilted",
                         precision=Precision(samples=50_000), seed=4)
    for m in res.measures:
        z = float(stats.norm.isf(1.0 - m.level))
        assert covers(m.var, 1.0 + 2.0 * z)
        assert covers(m.tvar, 1.0 + 2.0 * float(stats.norm.pdf(z)) / (1.0 - m.level))


def test_single_lognormal_var_matches_its_quantile():
    # Reference: scipy.stats.lognorm.ppf. With one claim the conditional estimator is exact,
    # so only the grid interpolation is left: 1e-4 relative.
    port = single(Fixed(n=1), Lognormal(mu=0.5, sigma=1.2))
    res = tail_estimates(port, levels=LEVELS, method="conditional",
                         precision=Precision(samples=5_000), seed=5)
    for m in res.measures:
        exact = float(stats.lognorm(s=1.2, scale=np.exp(0.5)).ppf(m.level))
        assert m.var.value == pytest.approx(exact, rel=1e-4)


def poisson_gamma_stop_loss(lam: float, mean: float, a: float) -> float:
    # Reference: compound Poisson exponential claims are a Poisson mixture of gamma laws;
    # E[(G_n - a)+] = n m gamma(n + 1, m).sf(a) - a gamma(n, m).sf(a) (closed form).
    n = np.arange(1, 300)
    pn = stats.poisson(lam).pmf(n)
    sl = n * mean * stats.gamma(n + 1, scale=mean).sf(a) - a * stats.gamma(n, scale=mean).sf(a)
    return float(np.sum(pn * sl))


def test_layer_losses_match_the_poisson_gamma_mixture():
    port = single(Poisson(mean=3.0), Exponential(mean=2.0))
    layers = [Layer(attachment=10.0, limit=10.0), Layer(attachment=20.0, limit=None)]
    res = tail_estimates(port, layers=layers, precision=Precision(samples=50_000), seed=6)
    for est in res.layers:
        top = est.attachment + (est.limit or np.inf)
        exact = poisson_gamma_stop_loss(3.0, 2.0, est.attachment) - (
            poisson_gamma_stop_loss(3.0, 2.0, top) if np.isfinite(top) else 0.0)
        assert covers(est.expected_loss, exact), (est, exact)
        n = np.arange(1, 300)
        attach = float(np.sum(stats.poisson(3.0).pmf(n) * stats.gamma(n, scale=2.0)
                              .sf(est.attachment)))
        assert covers(est.probability_attach, attach)


def test_adjacent_layers_add_up_and_measures_are_ordered():
    # Facts of the trade: adjacent layers add up to the combined layer; VaR rises with the
    # level; TVaR >= VaR.
    port = single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))
    layers = [Layer(attachment=100.0, limit=50.0), Layer(attachment=150.0, limit=100.0),
              Layer(attachment=100.0, limit=150.0)]
    res = tail_estimates(port, levels=LEVELS, layers=layers,
                         precision=Precision(samples=20_000), seed=7)
    a, b, ab = (ly.expected_loss for ly in res.layers)
    # Same samples, per-sample additivity: only rounding separates the two sides.
    assert a.value + b.value == pytest.approx(ab.value, rel=1e-9)
    vars_ = [m.var.value for m in res.measures]
    assert vars_ == sorted(vars_)
    assert all(m.tvar.value >= m.var.value for m in res.measures)


def test_var_approaches_the_single_loss_approximation_far_out():
    # Reference: single-loss approximation with mean correction for compound Poisson
    # subexponential sums (Boecker and Klueppelberg 2005; correction as in Boecker and
    # Sprittulla 2006): VaR_q ~ F^-1(1 - (1 - q)/lambda) + (lambda - 1) E[X] ... here used in
    # its simplest corrected form F^-1(1 - (1-q)/lambda) + lambda E[X] (from memory); the ratio
    # must tend to 1 as q -> 1.
    lam, sev = 5.0, stats.lognorm(s=2.0)
    port = single(Poisson(mean=lam), Lognormal(mu=0.0, sigma=2.0))
    levels = [0.9999, 0.99999]
    res = tail_estimates(port, levels=levels, precision=Precision(samples=50_000), seed=8)
    ratios = []
    for m in res.measures:
        sla = float(sev.isf((1.0 - m.level) / lam)) + lam * float(sev.mean())
        ratios.append(m.var.value / sla)
    assert abs(ratios[-1] - 1.0) < 0.03
    assert abs(ratios[-1] - 1.0) <= abs(ratios[0] - 1.0) + 0.005


def test_var_relative_half_width_targets_with_1e5_samples():
    # The precision targets (VaR half-width <= 0.5%, TVaR <= 1%) on the compound
    # Poisson lognormal(0, 1.5) book.
    port = single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))
    res = tail_estimates(port, levels=[0.995, 0.999, 0.9999],
                         precision=Precision(samples=100_000), seed=9)
    for m in res.measures:
        assert (m.var.ci_high - m.var.ci_low) / 2 / m.var.value <= 0.005
        assert (m.tvar.ci_high - m.tvar.ci_low) / 2 / m.tvar.value <= 0.01


def test_recursion_bounds_bracket_exact_var_tvar_and_layers():
    # References: gamma(40, 1) for the sum of 20 gamma(2, 1) claims (scipy.stats.gamma, TVaR
    # closed form as above); the Poisson mixture of gamma stop-loss transforms for layers.
    port = single(Fixed(n=20), Gamma(shape=2.0, scale=1.0))
    res = tail_estimates(port, levels=LEVELS, method="recursion")
    law = stats.gamma(40.0)
    for m in res.measures:
        v = float(law.ppf(m.level))
        tvar = 40.0 * float(stats.gamma(41.0).sf(v)) / (1.0 - m.level)
        assert m.var.ci_low <= v <= m.var.ci_high
        assert m.tvar.ci_low <= tvar <= m.tvar.ci_high
        assert m.var.std_error is None
    port = single(Poisson(mean=3.0), Exponential(mean=2.0))
    layers = [Layer(attachment=10.0, limit=10.0), Layer(attachment=20.0, limit=None)]
    res = tail_estimates(port, layers=layers, method="recursion")
    for est in res.layers:
        top = est.attachment + (est.limit or np.inf)
        exact = poisson_gamma_stop_loss(3.0, 2.0, est.attachment) - (
            poisson_gamma_stop_loss(3.0, 2.0, top) if np.isfinite(top) else 0.0)
        assert est.expected_loss.ci_low <= exact <= est.expected_loss.ci_high
        assert est.expected_loss.ci_high - est.expected_loss.ci_low < 0.01 * exact
