"""Severity laws against scipy.stats, closed forms in log space and independent quadrature."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from core.errors import ParameterError
from core.severities import (
    Capped,
    Excess,
    Exponential,
    Gamma,
    GeneralizedPareto,
    Lognormal,
    Normal,
    Pareto,
    PhaseType,
    Severity,
    Weibull,
)

# Each law next to the scipy.stats law it must equal (scipy is the outside reference).
PAIRS = [
    (Lognormal(mu=0.5, sigma=1.2), stats.lognorm(s=1.2, scale=math.exp(0.5))),
    (Pareto(alpha=2.5, scale=3.0), stats.lomax(c=2.5, scale=3.0)),
    (Weibull(shape=0.7, scale=2.0), stats.weibull_min(c=0.7, scale=2.0)),
    (Weibull(shape=1.5, scale=2.0), stats.weibull_min(c=1.5, scale=2.0)),
    (Gamma(shape=2.5, scale=1.5), stats.gamma(a=2.5, scale=1.5)),
    (Gamma(shape=0.6, scale=2.0), stats.gamma(a=0.6, scale=2.0)),
    (Exponential(mean=2.0), stats.expon(scale=2.0)),
    (Normal(mean=1.0, sd=2.0), stats.norm(loc=1.0, scale=2.0)),
    (GeneralizedPareto(xi=0.3, scale=2.0), stats.genpareto(c=0.3, scale=2.0)),
    (GeneralizedPareto(xi=0.0, scale=2.0), stats.genpareto(c=0.0, scale=2.0)),
    (GeneralizedPareto(xi=-0.3, scale=2.0), stats.genpareto(c=-0.3, scale=2.0)),
]
IDS = [repr(law) for law, _ in PAIRS]
X = np.array([0.05, 0.3, 1.0, 2.5, 6.0, 15.0])
Q = np.array([1e-10, 0.01, 0.3, 0.5, 0.9, 0.999])

# Erlang(3, rate 2) written as a phase-type law: it is the gamma law with shape 3, scale 1/2.
ERLANG_T = np.array([[-2.0, 2.0, 0.0], [0.0, -2.0, 2.0], [0.0, 0.0, -2.0]])
ERLANG = PhaseType(alpha=[1.0, 0.0, 0.0], T=ERLANG_T)
ERLANG_GAMMA = Gamma(shape=3.0, scale=0.5)


def _quad(fn, a: float, b: float) -> float:
    return float(integrate.quad(fn, a, b, limit=500, epsabs=0.0, epsrel=1e-11)[0])


# ---------------------------------------------------------------------------- against scipy


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_sf_cdf_pdf_and_logs_match_scipy(law: Severity, ref) -> None:
    np.testing.assert_allclose(law.sf(X), ref.sf(X), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(law.cdf(X), ref.cdf(X), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(law.pdf(X), ref.pdf(X), rtol=1e-10, atol=1e-300)
    inside = ref.sf(X) > 0
    np.testing.assert_allclose(law.logsf(X[inside]), ref.logsf(X[inside]), rtol=1e-10)
    np.testing.assert_allclose(law.logcdf(X), ref.logcdf(X), rtol=1e-10)


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_ppf_and_isf_match_scipy(law: Severity, ref) -> None:
    np.testing.assert_allclose(law.ppf(Q), ref.ppf(Q), rtol=1e-9)
    np.testing.assert_allclose(law.isf(Q), ref.isf(Q), rtol=1e-9)


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_mean_variance_and_moments_match_scipy(law: Severity, ref) -> None:
    assert law.mean == pytest.approx(ref.mean(), rel=1e-10)
    assert law.variance == pytest.approx(ref.var(), rel=1e-9)
    third = ref.moment(3)
    if np.isfinite(third):
        assert law.moment(3) == pytest.approx(third, rel=1e-9)
    else:  # scipy answers nan or inf where the third moment diverges
        assert law.moment(3) == math.inf


def _limited_moment_by_quad(ref, t: float, k: int) -> float:
    """E[min(X, t)^k] = int_lo^t x^k dF(x) + t^k sf(t), by tight quadrature of scipy's pdf."""
    lo = max(ref.support()[0], -60.0)
    body = _quad(lambda v: v**k * ref.pdf(v), lo, min(t, ref.support()[1]))
    return body + t**k * float(ref.sf(t))


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_lev_matches_quadrature_of_sf_and_scipy_expect(law: Severity, ref) -> None:
    for t in (0.4, 2.0, 9.0):
        # scipy's expect integrates min(x, t) dF with its default (about 1e-8) tolerance
        expected = ref.expect(lambda v, t=t: np.minimum(v, t))
        assert law.lev(t) == pytest.approx(expected, rel=1e-6)
        expected2 = ref.expect(lambda v, t=t: np.minimum(v, t) ** 2)
        assert law.lev2(t) == pytest.approx(expected2, rel=1e-6)
        # tight references: E[min(X, t)] = int_0^t sf(x) dx for X >= 0, and the pdf integrals
        if law.support_min == 0:
            assert law.lev(t) == pytest.approx(_quad(ref.sf, 0.0, t), rel=1e-10)
            assert law.lev2(t) == pytest.approx(
                2.0 * _quad(lambda v: v * ref.sf(v), 0.0, t), rel=1e-10
            )
        assert law.lev(t) == pytest.approx(_limited_moment_by_quad(ref, t, 1), rel=1e-9)
        assert law.lev2(t) == pytest.approx(_limited_moment_by_quad(ref, t, 2), rel=1e-9)


def test_lev_is_t_below_the_support_and_the_mean_at_infinity() -> None:
    law = Gamma(shape=2.0, scale=3.0)
    assert law.lev(-1.0) == -1.0
    assert law.lev(math.inf) == pytest.approx(6.0)
    assert law.lev2(math.inf) == pytest.approx(6.0**2 + 18.0)


def test_infinite_moments_are_reported_as_inf() -> None:
    # Lomax E[X^k] is finite iff k < alpha; GPD iff xi < 1/k (common practice)
    assert Pareto(alpha=1.5, scale=1.0).variance == math.inf
    assert Pareto(alpha=0.8, scale=1.0).mean == math.inf
    assert GeneralizedPareto(xi=0.6, scale=1.0).variance == math.inf
    assert math.isfinite(GeneralizedPareto(xi=0.4, scale=1.0).variance)
    assert Lognormal(mu=0.0, sigma=40.0).moment(2) == math.inf


def test_scalar_in_gives_float_out_and_arrays_keep_shape() -> None:
    law = Lognormal(mu=0.0, sigma=1.0)
    assert isinstance(law.sf(1.0), float)
    assert isinstance(law.lev(1.0), float)
    assert isinstance(law.cumulant(-1.0), float)
    grid = np.ones((2, 3))
    assert law.logsf(grid).shape == (2, 3)
    assert law.sample((4, 5), rng=0).shape == (4, 5)


def test_below_the_support_sf_is_one_and_density_zero() -> None:
    law = Weibull(shape=2.0, scale=1.0)
    assert law.sf(-3.0) == 1.0
    assert law.logsf(-3.0) == 0.0
    assert law.pdf(-3.0) == 0.0
    assert law.logcdf(-3.0) == -math.inf


# ---------------------------------------------------------------------------- far tails


def test_lognormal_logsf_matches_log_ndtr_far_in_tail() -> None:
    law = Lognormal(mu=1.0, sigma=0.8)
    x = np.exp(1.0 + 0.8 * np.array([37.0, 40.0, 100.0]))  # sf about 1e-300 and far beyond
    # closed form: log P(X > x) = log Phi(-(log x - mu) / sigma), scipy.special.log_ndtr
    np.testing.assert_allclose(law.logsf(x), special.log_ndtr(-np.array([37.0, 40.0, 100.0])))
    assert np.all(np.isfinite(law.logsf(x)))
    assert law.logsf(x[0]) == pytest.approx(math.log(1e-300), rel=0.01)


def test_pareto_weibull_gpd_logsf_match_closed_forms_at_1e_300() -> None:
    log_q = math.log(1e-300)
    pareto = Pareto(alpha=2.0, scale=3.0)
    x = 3.0 * math.expm1(-log_q / 2.0)  # solves -alpha log1p(x / scale) = log_q
    assert pareto.logsf(x) == pytest.approx(log_q, rel=1e-12)
    assert pareto.sf(x) == pytest.approx(1e-300, rel=1e-10)
    weibull = Weibull(shape=0.5, scale=2.0)
    assert weibull.logsf(2.0 * 690.0**2) == pytest.approx(-690.0, rel=1e-12)
    gpd = GeneralizedPareto(xi=0.25, scale=1.5)
    x = 1.5 / 0.25 * math.expm1(-0.25 * log_q)
    assert gpd.logsf(x) == pytest.approx(log_q, rel=1e-12)


def test_normal_logsf_matches_log_ndtr_far_in_tail() -> None:
    law = Normal(mean=-2.0, sd=3.0)
    z = np.array([37.0, 60.0])
    np.testing.assert_allclose(law.logsf(-2.0 + 3.0 * z), special.log_ndtr(-z), rtol=1e-12)


def test_gamma_logsf_does_not_underflow_past_1e_300() -> None:
    # integer shape: Q(3, u) = e^-u (1 + u + u^2 / 2) exactly (Erlang survival, common practice)
    law = Gamma(shape=3.0, scale=2.0)
    u = np.array([700.0, 760.0, 2000.0, 1e5])
    expected = -u + np.log1p(u + u * u / 2.0)
    np.testing.assert_allclose(law.logsf(2.0 * u), expected, rtol=1e-13)


def test_gamma_logsf_with_fractional_shape_matches_asymptotic_series() -> None:
    # Gamma(a, x) ~ x^(a-1) e^-x [1 + (a-1)/x + (a-1)(a-2)/x^2 + ...], Abramowitz & Stegun
    # 6.5.32 (from memory); at x = 2000 four terms are exact to ~1e-15 relative
    a, x = 2.5, 2000.0
    series = 1.0 + (a - 1) / x + (a - 1) * (a - 2) / x**2 + (a - 1) * (a - 2) * (a - 3) / x**3
    expected = (a - 1) * math.log(x) - x + math.log(series) - math.lgamma(a)
    assert Gamma(shape=a, scale=1.0).logsf(x) == pytest.approx(expected, rel=1e-13)
    # on the other side of the switch to the continued fraction scipy is still accurate
    x_near = 620.0
    assert Gamma(shape=a, scale=1.0).logsf(x_near) == pytest.approx(
        stats.gamma.logsf(x_near, a), rel=1e-12
    )


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_isf_log_inverts_logsf_at_minus_700_and_beyond(law: Severity, ref: object) -> None:
    del ref  # the scipy twin is not needed here: the check is log space against itself
    log_q = np.array([-1e-12, -0.5, -30.0, -700.0, -1500.0])
    x = law.isf_log(log_q)
    if math.isinf(law.support_max):
        np.testing.assert_allclose(law.logsf(x), log_q, rtol=1e-9)
    else:  # bounded support: the far quantiles round to the upper end in double precision
        np.testing.assert_allclose(law.logsf(x[:3]), log_q[:3], rtol=1e-9)
        assert x[-1] == pytest.approx(law.support_max)


# ---------------------------------------------------------------------------- sampling


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=IDS)
def test_samples_follow_the_law_by_kolmogorov_smirnov(law: Severity, ref) -> None:
    draws = law.sample(4000, rng=np.random.default_rng(20240601))
    assert draws.dtype == np.float64
    assert stats.kstest(draws, ref.cdf).pvalue > 1e-3


def test_same_seed_gives_identical_draws() -> None:
    law = Gamma(shape=2.0, scale=1.0)
    np.testing.assert_array_equal(law.sample(50, rng=7), law.sample(50, rng=7))


def test_phase_type_samples_follow_the_erlang_gamma_law() -> None:
    draws = ERLANG.sample(4000, rng=11)
    # Erlang(3, 2) = gamma(3, scale 1/2) (common practice)
    assert stats.kstest(draws, stats.gamma(a=3.0, scale=0.5).cdf).pvalue > 1e-3


# ---------------------------------------------------------------------------- exponential moments


def _log_mgf_by_quad(ref, theta: float, lo: float, hi: float) -> float:
    return math.log(_quad(lambda v: math.exp(theta * v + ref.logpdf(v)), lo, hi))


@pytest.mark.parametrize(
    ("law", "ref", "thetas"),
    [
        (Gamma(shape=2.5, scale=1.5), stats.gamma(a=2.5, scale=1.5), (-1.0, 0.3, 0.6)),
        (Exponential(mean=2.0), stats.expon(scale=2.0), (-0.5, 0.3)),
        (Normal(mean=1.0, sd=2.0), stats.norm(loc=1.0, scale=2.0), (-0.7, 1.5)),
        (Weibull(shape=1.5, scale=2.0), stats.weibull_min(c=1.5, scale=2.0), (-2.0, 0.2, 3.0)),
        (Weibull(shape=1.0, scale=2.0), stats.weibull_min(c=1.0, scale=2.0), (-1.0, 0.4)),
        (Weibull(shape=0.6, scale=2.0), stats.weibull_min(c=0.6, scale=2.0), (-1.0,)),
        (Lognormal(mu=0.0, sigma=1.0), stats.lognorm(s=1.0), (-1.0, -0.05)),
        (Pareto(alpha=2.5, scale=3.0), stats.lomax(c=2.5, scale=3.0), (-0.5,)),
        (GeneralizedPareto(xi=-0.3, scale=2.0), stats.genpareto(c=-0.3, scale=2.0), (-1.0, 4.0)),
    ],
    ids=lambda v: repr(v) if isinstance(v, Severity) else "",
)
def test_cumulant_matches_quadrature_of_the_mgf(law: Severity, ref, thetas) -> None:
    lo, hi = ref.support()
    lo = max(lo, -60.0)  # the normal density is 0 in double precision beyond this
    hi = min(hi, 400.0)
    for theta in thetas:
        expected = _log_mgf_by_quad(ref, theta, lo, hi)
        assert law.cumulant(theta) == pytest.approx(expected, rel=1e-8, abs=1e-11)


@pytest.mark.parametrize(
    ("law", "ref", "theta"),
    [
        (Gamma(shape=2.5, scale=1.5), stats.gamma(a=2.5, scale=1.5), 0.4),
        (Normal(mean=1.0, sd=2.0), stats.norm(loc=1.0, scale=2.0), -0.7),
        (Weibull(shape=1.5, scale=2.0), stats.weibull_min(c=1.5, scale=2.0), 1.0),
        (Lognormal(mu=0.0, sigma=1.0), stats.lognorm(s=1.0), -1.0),
    ],
    ids=["gamma", "normal", "weibull", "lognormal"],
)
def test_cumulant_derivatives_are_mean_and_variance_of_the_tilted_law(law, ref, theta) -> None:
    lo, hi = max(ref.support()[0], -60.0), 400.0
    weight = [
        _quad(lambda v, p=p: v**p * math.exp(theta * v + ref.logpdf(v)), lo, hi) for p in range(3)
    ]
    mean = weight[1] / weight[0]
    first, second = law.cumulant_derivatives(theta)
    assert first == pytest.approx(mean, rel=1e-8)
    assert second == pytest.approx(weight[2] / weight[0] - mean**2, rel=1e-7)


def test_cumulant_is_infinite_beyond_its_bound() -> None:
    assert Gamma(shape=2.0, scale=0.5).cumulant_bound == 2.0
    assert Gamma(shape=2.0, scale=0.5).cumulant(2.0) == math.inf
    assert Exponential(mean=4.0).cumulant_bound == 0.25
    assert Weibull(shape=1.0, scale=2.0).cumulant_bound == 0.5
    for heavy in (Lognormal(mu=0, sigma=1), Pareto(alpha=3, scale=1), Weibull(shape=0.5, scale=1)):
        assert heavy.cumulant_bound == 0.0
        assert heavy.cumulant(1e-6) == math.inf
        assert heavy.cumulant(0.0) == 0.0
        assert heavy.cumulant_derivatives(1e-3)[0] == math.inf
    light_everywhere = (
        Normal(mean=0, sd=1),
        Weibull(shape=2, scale=1),
        GeneralizedPareto(xi=-0.2, scale=1),
        Capped(base=Pareto(alpha=1.2, scale=1), cap=5),
    )
    for law in light_everywhere:
        assert law.cumulant_bound == math.inf


@pytest.mark.parametrize(
    ("law", "theta"),
    [
        (Gamma(shape=2.5, scale=1.5), 0.4),
        (Exponential(mean=2.0), 0.3),
        (Normal(mean=1.0, sd=2.0), 0.8),
        (Weibull(shape=1.0, scale=2.0), 0.3),
        (GeneralizedPareto(xi=0.0, scale=2.0), 0.3),
        (ERLANG, 1.2),
    ],
    ids=repr,
)
def test_tilted_samples_have_mean_kappa_prime(law: Severity, theta: float) -> None:
    n = 20000
    draws = law.sample_tilted(theta, n, rng=np.random.default_rng(5))
    first, second = law.cumulant_derivatives(theta)
    # 4.5 standard errors of a mean of n draws with variance kappa''
    assert abs(draws.mean() - first) < 4.5 * math.sqrt(second / n)


@pytest.mark.parametrize(
    ("law", "theta"),
    [(Gamma(shape=2.5, scale=1.5), 0.4), (Normal(mean=1.0, sd=2.0), -0.8), (ERLANG, 1.2)],
    ids=repr,
)
def test_tilted_density_is_the_reweighted_density(law: Severity, theta: float) -> None:
    x = np.array([0.2, 1.0, 3.0, 8.0])
    expected = np.exp(theta * x + law.logpdf(x) - law.cumulant(theta))
    np.testing.assert_allclose(law.tilted(theta).pdf(x), expected, rtol=1e-10)


def test_phase_type_cumulant_matches_the_erlang_gamma_closed_form() -> None:
    # M(s) = (1 - s scale)^-shape for the gamma law (common practice)
    thetas = np.array([-3.0, 0.5, 1.9])
    np.testing.assert_allclose(ERLANG.cumulant(thetas), -3.0 * np.log1p(-0.5 * thetas))
    assert ERLANG.cumulant_bound == pytest.approx(2.0)
    assert ERLANG.cumulant(2.0) == math.inf
    first, second = ERLANG.cumulant_derivatives(1.0)
    assert first == pytest.approx(3.0 * 0.5 / 0.5)
    assert second == pytest.approx(3.0 * 1.0**2)


def test_sample_tilted_without_a_closed_form_raises_not_implemented() -> None:
    for law in (Lognormal(mu=0, sigma=1), Weibull(shape=1.5, scale=1), Capped(base=ERLANG, cap=2)):
        with pytest.raises(NotImplementedError):
            law.sample_tilted(-0.1, 10, rng=0)


def test_tilting_at_or_beyond_the_bound_names_theta() -> None:
    with pytest.raises(ParameterError) as info:
        Gamma(shape=2.0, scale=0.5).sample_tilted(2.0, 10, rng=0)
    assert info.value.parameter == "theta"


# ---------------------------------------------------------------------------- phase-type


def test_phase_type_erlang_equals_gamma_including_far_tail() -> None:
    x = np.array([0.1, 1.0, 5.0, 400.0, 1000.0])  # sf(1000) is about e^-1990
    np.testing.assert_allclose(ERLANG.logsf(x), ERLANG_GAMMA.logsf(x), rtol=1e-12)
    np.testing.assert_allclose(ERLANG.logpdf(x), ERLANG_GAMMA.logpdf(x), rtol=1e-12)
    np.testing.assert_allclose(ERLANG.ppf(Q[1:]), ERLANG_GAMMA.ppf(Q[1:]), rtol=1e-9)
    assert ERLANG.mean == pytest.approx(1.5)
    assert ERLANG.variance == pytest.approx(0.75)
    t = np.array([0.5, 2.0])
    np.testing.assert_allclose(ERLANG.lev(t), ERLANG_GAMMA.lev(t), rtol=1e-12)
    np.testing.assert_allclose(ERLANG.lev2(t), ERLANG_GAMMA.lev2(t), rtol=1e-12)


def test_phase_type_hyperexponential_matches_the_mixture() -> None:
    law = PhaseType(alpha=[0.3, 0.7], T=[[-1.0, 0.0], [0.0, -5.0]])
    x = np.array([0.5, 2.0, 50.0])
    mixture = 0.3 * np.exp(-x) + 0.7 * np.exp(-5.0 * x)
    np.testing.assert_allclose(law.sf(x), mixture, rtol=1e-12)
    assert law.mean == pytest.approx(0.3 + 0.7 / 5.0)
    assert law.moment(2) == pytest.approx(0.3 * 2 + 0.7 * 2 / 25.0)


# ---------------------------------------------------------------------------- layer laws


def test_excess_of_a_lomax_is_a_lomax_with_shifted_scale() -> None:
    # (1 + (r + y)/s)^-a / (1 + r/s)^-a = (1 + y/(s + r))^-a (common practice)
    law = Excess(base=Pareto(alpha=2.5, scale=3.0), retention=10.0)
    ref = stats.lomax(c=2.5, scale=13.0)
    np.testing.assert_allclose(law.sf(X), ref.sf(X), rtol=1e-12)
    np.testing.assert_allclose(law.pdf(X), ref.pdf(X), rtol=1e-12)
    assert law.mean == pytest.approx(ref.mean(), rel=1e-9)
    assert law.variance == pytest.approx(ref.var(), rel=1e-8)
    assert law.lev(5.0) == pytest.approx(ref.expect(lambda v: np.minimum(v, 5.0)), rel=1e-9)
    assert law.tail == "heavy"


def test_excess_of_a_gpd_is_a_gpd_with_scale_plus_xi_times_retention() -> None:
    # threshold stability of the generalized Pareto law (Pickands-Balkema-de Haan, common practice)
    law = Excess(base=GeneralizedPareto(xi=-0.2, scale=2.0), retention=3.0)
    ref = stats.genpareto(c=-0.2, scale=2.0 - 0.2 * 3.0)
    np.testing.assert_allclose(law.sf(X[:4]), ref.sf(X[:4]), rtol=1e-11, atol=1e-300)
    assert law.support_max == pytest.approx(ref.support()[1])
    assert law.mean == pytest.approx(ref.mean(), rel=1e-9)
    assert law.cumulant(0.7) == pytest.approx(
        _log_mgf_by_quad(ref, 0.7, 0.0, ref.support()[1]), rel=1e-8
    )


def test_excess_over_a_far_retention_samples_in_log_space() -> None:
    # sf(r) = 1e-200 here: a plain inverse transform would need uniforms below 1e-200
    far_pareto = Excess(base=Pareto(alpha=2.0, scale=1.0), retention=1e100 - 1.0)
    assert far_pareto.log_sf_retention == pytest.approx(math.log(1e-200), rel=1e-12)
    draws = far_pareto.sample(3000, rng=3)
    assert stats.kstest(draws, stats.lomax(c=2.0, scale=1e100).cdf).pvalue > 1e-3
    # exponential excesses are exponential whatever the retention (memorylessness)
    far_exp = Excess(base=Exponential(mean=1.0), retention=460.0)
    assert far_exp.sf(1.0) == pytest.approx(math.exp(-1.0), rel=1e-12)
    assert stats.kstest(far_exp.sample(3000, rng=4), stats.expon.cdf).pvalue > 1e-3
    far_lognormal = Excess(base=Lognormal(mu=0.0, sigma=1.0), retention=math.exp(30.0))
    assert far_lognormal.log_sf_retention == pytest.approx(special.log_ndtr(-30.0))
    assert np.all(np.isfinite(far_lognormal.sample(100, rng=5)))
    assert np.all(far_lognormal.sample(100, rng=5) > 0)


def test_capped_law_has_the_limited_moments_and_an_atom_at_the_cap() -> None:
    base, cap = stats.lognorm(s=1.0), 3.0
    law = Capped(base=Lognormal(mu=0.0, sigma=1.0), cap=cap)
    assert law.mean == pytest.approx(_limited_moment_by_quad(base, cap, 1), rel=1e-10)
    second = _limited_moment_by_quad(base, cap, 2)
    assert law.variance == pytest.approx(second - law.mean**2, rel=1e-8)
    assert law.atom == pytest.approx(base.sf(cap), rel=1e-12)
    np.testing.assert_allclose(law.cdf([0.5, 2.9]), base.cdf([0.5, 2.9]), rtol=1e-12)
    assert law.cdf(cap) == 1.0
    assert law.ppf(0.999) == cap
    draws = law.sample(20000, rng=9)
    assert draws.max() == cap
    share = np.mean(draws == cap)
    assert abs(share - law.atom) < 4.5 * math.sqrt(law.atom * (1 - law.atom) / draws.size)
    assert law.tail == "light"


def test_capped_cumulant_adds_the_atom_to_the_quadrature() -> None:
    base, cap = stats.lognorm(s=1.0), 3.0
    law = Capped(base=Lognormal(mu=0.0, sigma=1.0), cap=cap)
    for theta in (-1.0, 0.5, 4.0):
        body = _quad(lambda v, t=theta: math.exp(t * v + base.logpdf(v)), 0.0, cap)
        expected = math.log(body + math.exp(theta * cap) * base.sf(cap))
        assert law.cumulant(theta) == pytest.approx(expected, rel=1e-9)
    weights = [
        _quad(lambda v, p=p: v**p * math.exp(4.0 * v + base.logpdf(v)), 0.0, cap)
        + cap**p * math.exp(4.0 * cap) * base.sf(cap)
        for p in range(3)
    ]
    first, second = law.cumulant_derivatives(4.0)
    assert first == pytest.approx(weights[1] / weights[0], rel=1e-9)
    assert second == pytest.approx(weights[2] / weights[0] - first**2, rel=1e-7)


def test_excess_then_capped_gives_the_per_claim_layer_payment() -> None:
    # E[min((X - r)+, l)] = E[min(X, r + l)] - E[min(X, r)] (common practice)
    ground = Gamma(shape=2.0, scale=5.0)
    r, limit = 8.0, 12.0
    layer = Capped(base=Excess(base=ground, retention=r), cap=limit)
    expected = (ground.lev(r + limit) - ground.lev(r)) / ground.sf(r)
    assert layer.mean == pytest.approx(expected, rel=1e-10)


# ---------------------------------------------------------------------------- classes and errors


def test_tail_classes_follow_the_heavy_light_rule() -> None:
    heavy = [
        Lognormal(mu=0, sigma=1),
        Pareto(alpha=2, scale=1),
        Weibull(shape=0.5, scale=1),
        GeneralizedPareto(xi=0.1, scale=1),
    ]
    light = [
        Weibull(shape=1.0, scale=1),
        Weibull(shape=2.0, scale=1),
        Gamma(shape=2, scale=1),
        Exponential(mean=1),
        Normal(mean=0, sd=1),
        GeneralizedPareto(xi=0.0, scale=1),
        GeneralizedPareto(xi=-0.1, scale=1),
        ERLANG,
    ]
    assert all(law.tail == "heavy" for law in heavy)
    assert all(law.tail == "light" for law in light)
    assert Normal(mean=0, sd=1).support_min == -math.inf
    assert Gamma(shape=2, scale=1).support_min == 0.0
    assert [law.family for law in heavy] == ["lognormal", "pareto", "weibull", "generalized_pareto"]


@pytest.mark.parametrize(
    ("build", "parameter"),
    [
        (lambda: Lognormal(mu=0.0, sigma=-1.0), "sigma"),
        (lambda: Lognormal(mu=math.nan, sigma=1.0), "mu"),
        (lambda: Pareto(alpha=0.0, scale=1.0), "alpha"),
        (lambda: Pareto(alpha=2.0, scale=math.inf), "scale"),
        (lambda: Weibull(shape=-1.0, scale=1.0), "shape"),
        (lambda: Gamma(shape=1.0, scale=0.0), "scale"),
        (lambda: Exponential(mean=-2.0), "mean"),
        (lambda: Normal(mean=0.0, sd=0.0), "sd"),
        (lambda: Normal(mean=math.inf, sd=1.0), "mean"),
        (lambda: GeneralizedPareto(xi=math.nan, scale=1.0), "xi"),
        (lambda: GeneralizedPareto(xi=0.1, scale=-1.0), "scale"),
        (lambda: PhaseType(alpha=[0.5, 0.4], T=[[-1.0, 0.0], [0.0, -1.0]]), "alpha"),
        (lambda: PhaseType(alpha=[1.0], T=[[1.0]]), "T"),
        (lambda: PhaseType(alpha=[1.0, 0.0], T=[[-1.0, 2.0], [0.0, -1.0]]), "T"),
        (lambda: Excess(base=GeneralizedPareto(xi=-0.5, scale=1.0), retention=2.0), "retention"),
        (lambda: Excess(base=Gamma(shape=1.0, scale=1.0), retention=-1.0), "retention"),
        (lambda: Capped(base=Gamma(shape=1.0, scale=1.0), cap=0.0), "cap"),
        (lambda: Capped(base="lognormal", cap=1.0), "base"),  # type: ignore[arg-type]
    ],
)
def test_invalid_parameters_raise_parameter_error_naming_them(build, parameter: str) -> None:
    with pytest.raises(ParameterError) as info:
        build()
    assert info.value.parameter == parameter


def test_parameter_error_message_quotes_the_bad_value() -> None:
    with pytest.raises(ParameterError, match=r"sigma: must be > 0, got -1\.0"):
        Lognormal(mu=0.0, sigma=-1.0)


def test_probabilities_outside_the_unit_interval_are_rejected() -> None:
    law = Exponential(mean=1.0)
    with pytest.raises(ParameterError) as info:
        law.ppf(1.5)
    assert info.value.parameter == "q"
    with pytest.raises(ParameterError) as info:
        law.isf_log(0.1)
    assert info.value.parameter == "log_q"
    with pytest.raises(ParameterError) as info:
        law.moment(-1)
    assert info.value.parameter == "k"


def test_constructors_are_keyword_only_and_laws_compare_by_value() -> None:
    with pytest.raises(TypeError):
        Lognormal(0.0, 1.0)  # type: ignore[misc]
    with pytest.raises(TypeError):
        Exponential(1.0)  # type: ignore[misc]
    assert Exponential(mean=2.0) == Exponential(mean=2.0)
    assert Normal(mean=0.0, sd=1.0) != Normal(mean=0.0, sd=2.0)
    assert repr(Normal(mean=0.0, sd=1.0)) == "Normal(mean=0.0, sd=1.0)"
    assert Gamma(shape=2.0, scale=1.0) == Gamma(shape=2, scale=1)


@pytest.mark.parametrize("sev, ref", [
    (Lognormal(mu=0.0, sigma=1.5), stats.lognorm(1.5)),
    (Pareto(alpha=2.5, scale=3.0), stats.lomax(2.5, scale=3.0)),
    (Weibull(shape=0.5, scale=2.0), stats.weibull_min(0.5, scale=2.0)),
    (Gamma(shape=2.0, scale=5.0), stats.gamma(2.0, scale=5.0)),
])
def test_tail_mean_is_the_first_moment_beyond_t(sev, ref):
    # Reference: scipy.stats' expect (quadrature of x f(x) over (t, inf)); moderate t only,
    # where quadrature is itself accurate. The closed forms (lognormal, Pareto, Weibull) and
    # the default mean - lev(t) + t sf(t) must agree with it.
    for t in (0.0, 0.5, 5.0, 50.0):
        want = ref.expect(lambda x: x, lb=t, conditional=False)
        assert float(sev.tail_mean(t)) == pytest.approx(want, rel=1e-8)
    assert float(sev.tail_mean(-1.0)) == pytest.approx(sev.mean, rel=1e-12)


def test_tail_mean_far_in_the_tail_has_no_cancellation():
    # Reference: E[X; X > t] = t sf(t) + int_t^inf sf(x) dx, the integral by scipy's quad of
    # scipy.stats' own survival function over y = ln x (up to ln t + 60, where a power tail has
    # lost e^-90 of its mass), at t where mean - lev(t) loses every digit.
    for sev, ref, t in ((Lognormal(mu=0.0, sigma=1.0), stats.lognorm(1.0), 1e6),
                        (Pareto(alpha=2.5, scale=3.0), stats.lomax(2.5, scale=3.0), 5e4),
                        (Weibull(shape=0.5, scale=2.0), stats.weibull_min(0.5, scale=2.0), 2e3)):
        tail, _ = integrate.quad(lambda y, ref=ref: ref.sf(math.exp(y)) * math.exp(y),
                                 math.log(t), math.log(t) + 60.0, epsrel=1e-12, limit=200)
        want = t * ref.sf(t) + tail
        assert float(sev.tail_mean(t)) == pytest.approx(want, rel=1e-8), type(sev).__name__
