"""Claim-count laws against scipy.stats and against direct reweighting of their pmf."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special, stats

from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.errors import ParameterError

K = np.arange(0, 200)

# r = mean / (dispersion - 1) = 4 / 1.5, beta = 1.5, scipy's p = 1 / (1 + beta)
NB = NegativeBinomial(mean=4.0, dispersion=2.5)
PAIRS = [
    (Poisson(mean=3.5), stats.poisson(3.5)),
    (NB, stats.nbinom(4.0 / 1.5, 1.0 / 2.5)),
    (Binomial(trials=10, probability=0.3), stats.binom(10, 0.3)),
    (Binomial(trials=3, probability=1.0), stats.binom(3, 1.0)),
]
LAWS = [Fixed(n=4), Poisson(mean=3.5), NB, Binomial(trials=10, probability=0.3)]


def _pmf(law: ClaimCount) -> np.ndarray:
    return np.asarray(law.pmf(K))


def _same_law(law: ClaimCount, expected_pmf: np.ndarray) -> None:
    np.testing.assert_allclose(_pmf(law), expected_pmf, rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize(("law", "ref"), PAIRS, ids=[repr(law) for law, _ in PAIRS])
def test_pmf_cdf_and_moments_match_scipy(law: ClaimCount, ref) -> None:
    np.testing.assert_allclose(law.pmf(K), ref.pmf(K), rtol=1e-12, atol=1e-300)
    finite = ref.pmf(K) > 0
    np.testing.assert_allclose(law.logpmf(K[finite]), ref.logpmf(K[finite]), rtol=1e-12)
    np.testing.assert_allclose(law.cdf(K), ref.cdf(K), rtol=1e-12)
    assert law.mean == pytest.approx(ref.mean(), rel=1e-12)
    assert law.variance == pytest.approx(ref.var(), rel=1e-12)
    np.testing.assert_array_equal(law.quantile([0.01, 0.5, 0.999]), ref.ppf([0.01, 0.5, 0.999]))


def test_negative_binomial_pmf_is_the_stated_formula() -> None:
    # P(N = k) = C(k + r - 1, k) (beta / (1 + beta))^k (1 + beta)^-r, written with log-gammas
    r, beta = 4.0 / 1.5, 1.5
    k = np.arange(0, 30)
    log_comb = special.gammaln(k + r) - special.gammaln(r) - special.gammaln(k + 1)
    expected = np.exp(log_comb + k * np.log(beta / (1 + beta)) - r * np.log1p(beta))
    np.testing.assert_allclose(NB.pmf(k), expected, rtol=1e-12)
    assert NB.r == pytest.approx(r)
    assert NB.beta == pytest.approx(beta)
    assert NB.variance / NB.mean == pytest.approx(2.5)  # dispersion is Var / E


def test_fixed_count_is_a_point_mass() -> None:
    law = Fixed(n=4)
    expected = np.zeros(K.size)
    expected[4] = 1.0
    _same_law(law, expected)
    assert law.mean == 4.0
    assert law.variance == 0.0
    assert law.cdf(3) == 0.0
    assert law.cdf(4) == 1.0
    assert law.max_count == 4
    np.testing.assert_array_equal(law.sample(5, rng=0), np.full(5, 4))


@pytest.mark.parametrize("law", LAWS, ids=repr)
def test_samples_follow_the_pmf_by_chi_square(law: ClaimCount) -> None:
    n = 20000
    draws = law.sample(n, rng=np.random.default_rng(31))
    assert draws.dtype == np.int64
    if law.variance == 0:
        assert np.all(draws == law.mean)
        return
    top = int(law.quantile(0.995))  # pool the upper tail into one cell so no cell is tiny
    observed = np.bincount(np.minimum(draws, top), minlength=top + 1)
    expected = n * np.append(law.pmf(np.arange(top)), 1.0 - law.cdf(top - 1))
    assert stats.chisquare(observed, expected).pvalue > 1e-3


@pytest.mark.parametrize("law", LAWS, ids=repr)
def test_log_mgf_and_pgf_match_direct_sums_over_the_pmf(law: ClaimCount) -> None:
    k = np.arange(0, 3000)  # long enough that the e^{0.4 k} weighted negative binomial sum ends
    p, log_p = law.pmf(k), law.logpmf(k)
    for s in (-0.7, 0.2, 0.4):
        direct = math.log(np.sum(np.exp(log_p + s * k)))
        assert law.log_mgf(s) == pytest.approx(direct, rel=1e-10)
    for z in (0.0, 0.3, 0.9):
        assert law.pgf(z) == pytest.approx(np.sum(p * z**k), rel=1e-10, abs=1e-300)


def test_negative_binomial_log_mgf_is_infinite_beyond_its_bound() -> None:
    bound = math.log((1 + NB.beta) / NB.beta)
    assert NB.mgf_bound == pytest.approx(bound)
    assert NB.log_mgf(bound + 1e-9) == math.inf
    assert math.isfinite(NB.log_mgf(bound - 1e-3))
    assert Poisson(mean=2.0).mgf_bound == math.inf


@pytest.mark.parametrize("law", LAWS, ids=repr)
@pytest.mark.parametrize("s", [-0.5, 0.3])
def test_tilted_law_is_the_pmf_reweighted_by_exp_sk(law: ClaimCount, s: float) -> None:
    tilted = law.tilted(s)
    assert tilted.kind == law.kind
    weights = _pmf(law) * np.exp(s * K)
    _same_law(tilted, weights / weights.sum())


@pytest.mark.parametrize("law", LAWS[1:], ids=repr)
def test_tilt_for_mean_reaches_the_requested_mean(law: ClaimCount) -> None:
    for target in (0.5 * law.mean, 1.7 * law.mean):
        s = law.tilt_for_mean(target)
        weights = _pmf(law) * np.exp(s * K)
        assert np.sum(K * weights) / np.sum(weights) == pytest.approx(target, rel=1e-9)
        assert law.tilted(s).mean == pytest.approx(target, rel=1e-12)


def test_fixed_count_can_only_tilt_to_its_own_mean() -> None:
    assert Fixed(n=3).tilt_for_mean(3.0) == 0.0
    assert Fixed(n=3).tilted(1.0) == Fixed(n=3)
    with pytest.raises(ParameterError) as info:
        Fixed(n=3).tilt_for_mean(4.0)
    assert info.value.parameter == "m"


@pytest.mark.parametrize("law", LAWS, ids=repr)
def test_size_biased_minus_one_is_k_pk_over_mean_shifted_down(law: ClaimCount) -> None:
    # P(N* - 1 = j) = (j + 1) p_{j+1} / E[N]
    p = _pmf(law)
    shifted = np.append(K[1:] * p[1:] / law.mean, 0.0)
    _same_law(law.size_biased_minus_one(), shifted)


def test_size_biased_binomial_with_one_trial_is_zero() -> None:
    assert Binomial(trials=1, probability=0.4).size_biased_minus_one() == Fixed(n=0)


@pytest.mark.parametrize("law", LAWS, ids=repr)
@pytest.mark.parametrize("q", [0.25, 1.0])
def test_thinned_law_is_the_binomial_mixture_of_the_pmf(law: ClaimCount, q: float) -> None:
    # P(M = j) = sum_k p_k C(k, j) q^j (1 - q)^(k - j)
    p = _pmf(law)
    kept = stats.binom.pmf(K[:, None], K[None, :], q)  # [j, k]
    _same_law(law.thinned(q), kept @ p)


def test_thinning_keeps_the_family() -> None:
    assert Fixed(n=5).thinned(0.5) == Binomial(trials=5, probability=0.5)
    assert Fixed(n=5).thinned(1.0) == Fixed(n=5)
    assert isinstance(NB.thinned(0.5), NegativeBinomial)
    assert NB.thinned(0.5).r == pytest.approx(NB.r)
    assert Poisson(mean=2.0).thinned(0.5) == Poisson(mean=1.0)


def test_max_count_is_finite_only_for_bounded_laws() -> None:
    assert Binomial(trials=7, probability=0.5).max_count == 7
    assert Poisson(mean=1.0).max_count == math.inf
    assert NB.max_count == math.inf


@pytest.mark.parametrize(
    ("build", "parameter"),
    [
        (lambda: Fixed(n=-1), "n"),
        (lambda: Fixed(n=2.5), "n"),
        (lambda: Poisson(mean=0.0), "mean"),
        (lambda: Poisson(mean=math.nan), "mean"),
        (lambda: NegativeBinomial(mean=-1.0, dispersion=2.0), "mean"),
        (lambda: NegativeBinomial(mean=1.0, dispersion=1.0), "dispersion"),
        (lambda: Binomial(trials=0, probability=0.5), "trials"),
        (lambda: Binomial(trials=3, probability=0.0), "probability"),
        (lambda: Binomial(trials=3, probability=1.5), "probability"),
        (lambda: Poisson(mean=1.0).thinned(0.0), "q"),
        (lambda: NB.tilted(NB.mgf_bound), "s"),
        (lambda: Poisson(mean=1.0).tilt_for_mean(-1.0), "m"),
        (lambda: Binomial(trials=4, probability=0.5).tilt_for_mean(4.0), "m"),
        (lambda: Fixed(n=0).size_biased_minus_one(), "n"),
    ],
)
def test_invalid_arguments_raise_parameter_error_naming_them(build, parameter: str) -> None:
    with pytest.raises(ParameterError) as info:
        build()
    assert info.value.parameter == parameter


def test_dispersion_message_explains_the_poisson_limit() -> None:
    with pytest.raises(ParameterError, match=r"must be > 1 \(dispersion 1 is the Poisson law\)"):
        NegativeBinomial(mean=2.0, dispersion=1.0)


def test_counts_are_keyword_only_immutable_and_compare_by_value() -> None:
    with pytest.raises(TypeError):
        Poisson(2.0)  # type: ignore[misc]
    law = Poisson(mean=2.0)
    with pytest.raises(AttributeError):
        law.mean = 3.0  # type: ignore[misc]
    assert law == Poisson(mean=2.0)
    assert hash(law) == hash(Poisson(mean=2.0))
    assert repr(NB) == "NegativeBinomial(mean=4.0, dispersion=2.5)"
    assert [c.kind for c in LAWS] == ["fixed", "poisson", "negative_binomial", "binomial"]
