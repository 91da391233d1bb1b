"""Unit checks of the credit engine: validation, the tilted LGD law, exact likelihood ratios
(E_g[f/g] = 1), moments, reproducibility."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from core.credit.draws import Sampler
from core.credit.estimators import component
from core.credit.exceedance import credit_exceedance
from core.credit.lgd import BetaLGD
from core.credit.measures import credit_tail
from core.credit.model import CreditModel, group
from core.credit.moments import loss_moments
from core.errors import MethodError, ParameterError
from core.measures import Layer
from core.precision import Precision


def _model(copula: str = "gaussian", lgd: float | BetaLGD = 0.45) -> CreditModel:
    return CreditModel(groups=(
        group(count=400, exposure=1.0, default_probability=0.01, loss_given_default=lgd,
              factor_loadings=[0.4, 0.2]),
        group(count=50, exposure=10.0, default_probability=0.002, loss_given_default=lgd,
              factor_loadings=[0.1, 0.5])),
        factors=2, correlation=np.array([[1.0, 0.3], [0.3, 1.0]]), copula=copula,
        df=5.0 if copula == "student_t" else None)


@pytest.mark.parametrize(("kwargs", "where"), [
    ({"factor_loadings": [0.8, 0.7]}, "groups.0.factor_loadings"),
    ({"factor_loadings": [0.3]}, "groups.0.factor_loadings"),
])
def test_bad_loadings_are_refused_naming_the_group(kwargs: dict[str, object],
                                                   where: str) -> None:
    spec: dict[str, object] = {"count": 10, "exposure": 1.0, "default_probability": 0.01,
                               "loss_given_default": 0.5, "factor_loadings": [0.1, 0.1]}
    spec.update(kwargs)
    with pytest.raises(ParameterError) as err:
        CreditModel(groups=(group(**spec),), factors=2)  # type: ignore[arg-type]
    assert err.value.parameter == where


@pytest.mark.parametrize(("field", "value"), [
    ("default_probability", 0.0), ("default_probability", 1.0), ("exposure", -1.0),
    ("exposure", math.inf), ("loss_given_default", 1.5), ("count", 0),
])
def test_bad_group_numbers_are_refused(field: str, value: float) -> None:
    spec: dict[str, object] = {"count": 10, "exposure": 1.0, "default_probability": 0.01,
                               "loss_given_default": 0.5, "factor_loadings": [0.1]}
    spec[field] = value
    with pytest.raises(ParameterError) as err:
        group(**spec)  # type: ignore[arg-type]
    assert err.value.parameter == field


def test_correlation_must_be_positive_definite() -> None:
    bad = np.array([[1.0, 0.99, 0.0], [0.99, 1.0, 0.99], [0.0, 0.99, 1.0]])
    with pytest.raises(ParameterError) as err:
        CreditModel(groups=(group(count=1, exposure=1.0, default_probability=0.1,
                                  loss_given_default=1.0, factor_loadings=[0, 0, 0]),),
                    factors=3, correlation=bad)
    assert err.value.parameter == "correlation"


def test_beta_lgd_sd_must_fit_a_beta_law() -> None:
    with pytest.raises(ParameterError) as err:
        BetaLGD(0.5, 0.6)
    assert err.value.parameter == "loss_given_default.sd"


@pytest.mark.parametrize("t", [0.5, 3.0, 12.0])
def test_tilted_beta_draws_have_the_tilted_mean(t: float) -> None:
    # Reference: the mean of e^{t u} f(u) / M(t) by scipy.integrate.quad of scipy.stats.beta.
    lgd = BetaLGD(0.45, 0.2)
    dens = stats.beta(lgd.a, lgd.b)
    norm = integrate.quad(lambda u: math.exp(t * u) * dens.pdf(u), 0, 1)[0]
    mean = integrate.quad(lambda u: u * math.exp(t * u) * dens.pdf(u), 0, 1)[0] / norm
    u = lgd.sample_tilted(np.full(200_000, t), np.random.default_rng(1))
    se = u.std() / math.sqrt(u.size)
    assert abs(u.mean() - mean) <= 4 * se
    assert float(lgd.tilted_mean(np.array([t]))[0]) == pytest.approx(mean, rel=1e-9)
    assert float(lgd.log_mgf(np.array([t]))[0]) == pytest.approx(math.log(norm), rel=1e-9)


@pytest.mark.parametrize(("copula", "lgd"), [
    ("gaussian", 0.45), ("student_t", 0.45), ("gaussian", BetaLGD(0.45, 0.2)),
    ("student_t", BetaLGD(0.3, 0.15))])
def test_likelihood_ratio_has_mean_one_under_the_proposal(copula: str,
                                                          lgd: float | BetaLGD) -> None:
    # E_g[f/g] = 1 for an exact likelihood ratio (a fact of importance sampling).
    model = _model(copula, lgd)
    sampler = Sampler(model, [component(model, 120.0)], 0.1)
    d = sampler.draw(20_000, np.random.default_rng(5))
    w = np.exp(d.log_lr)
    assert abs(w.mean() - 1.0) <= 4 * w.std() / math.sqrt(w.size)
    assert w.max() <= 1.0 / 0.1 + 1e-9  # the defensive share caps the ratio


def test_moments_match_one_factor_quadrature() -> None:
    # Reference: E[L] and Var L = E[Var(L|Z)] + Var(E[L|Z]) by scipy.integrate.quad over the
    # factor of the binomial's mean and variance.
    n, p, rho, c = 1000, 0.01, 0.2, 0.45
    model = CreditModel(groups=(group(count=n, exposure=1.0, default_probability=p,
                                      loss_given_default=c,
                                      factor_loadings=[math.sqrt(rho)]),), factors=1)

    def cpd(z: float) -> float:
        return float(stats.norm.cdf((stats.norm.ppf(p) - math.sqrt(rho) * z)
                                    / math.sqrt(1 - rho)))

    m1 = integrate.quad(lambda z: stats.norm.pdf(z) * n * cpd(z), -12, 12)[0]
    m2 = integrate.quad(lambda z: stats.norm.pdf(z) * (n * cpd(z) * (1 - cpd(z))
                                                       + (n * cpd(z)) ** 2), -12, 12)[0]
    mean, sd = loss_moments(model)
    assert mean == pytest.approx(c * m1, rel=1e-9)
    assert sd == pytest.approx(c * math.sqrt(m2 - m1 * m1), rel=1e-6)


def test_beta_lgd_expected_loss_matches_closed_form() -> None:
    # Reference: E[L] = sum_g n_g e_g E[LGD] PD_g (linearity), the unlimited layer from 0.
    model = _model("gaussian", BetaLGD(0.45, 0.2))
    res = credit_tail(model, layers=[Layer(attachment=0.0, limit=None)],
                      method="glasserman_li", precision=Precision(samples=20_000), seed=3)
    el = res.layers[0].expected_loss
    assert el.std_error is not None
    assert abs(el.value - model.mean) <= 4 * el.std_error
    assert model.mean == pytest.approx(400 * 0.45 * 0.01 + 50 * 10 * 0.45 * 0.002)


def test_same_seed_same_answer_and_impossible_thresholds_are_exact_zeros() -> None:
    model = _model()
    args = {"method": "glasserman_li", "precision": Precision(samples=10_000), "seed": 9}
    a = credit_exceedance(model, [80.0, 1e6], **args)  # type: ignore[arg-type]
    b = credit_exceedance(model, [80.0, 1e6], **args)  # type: ignore[arg-type]
    assert a.estimates[0].value == b.estimates[0].value
    assert a.estimates[1].value == 0.0 and a.estimates[1].ci_high == 0.0
    assert any("largest possible loss" in w for w in a.warnings)


def test_recursion_is_refused_for_obligor_groups() -> None:
    with pytest.raises(MethodError) as err:
        credit_exceedance(_model(), [10.0], method="recursion")
    assert err.value.parameter == "method"
