"""The copula layer: validation messages, the factor, and draws checked against scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from core.dependence.copula import Copula, check_correlation, correlation_factor
from core.errors import ParameterError

NAME = "portfolio.dependence.correlation"


@pytest.mark.parametrize(
    ("matrix", "where", "words"),
    [
        ([[1.0, 0.2], [0.2]], f"{NAME}.1", "square"),
        ([[1.0, 0.2], [0.3, 1.0]], f"{NAME}.0.1", "symmetric"),
        ([[1.0, 1.5], [1.5, 1.0]], f"{NAME}.0.1", "[-1, 1]"),
        ([[0.9, 0.2], [0.2, 1.0]], f"{NAME}.0.0", "diagonal"),
        ([[1.0, "a"], ["a", 1.0]], f"{NAME}.0.1", "number"),
        ([[1.0, 0.9, -0.9], [0.9, 1.0, 0.9], [-0.9, 0.9, 1.0]], NAME, "-0.8"),
    ],
)
def test_invalid_correlation_names_the_entry(matrix: object, where: str, words: str) -> None:
    with pytest.raises(ParameterError) as info:
        check_correlation(matrix)
    assert info.value.parameter == where
    assert words in info.value.message


def test_not_psd_message_gives_the_smallest_eigenvalue() -> None:
    r = [[1.0, 0.9, -0.9], [0.9, 1.0, 0.9], [-0.9, 0.9, 1.0]]
    smallest = float(np.linalg.eigvalsh(np.array(r))[0])  # numpy, outside the module
    with pytest.raises(ParameterError) as info:
        check_correlation(r)
    assert f"{smallest:.6g}" in info.value.message


def test_size_must_match_the_lines() -> None:
    with pytest.raises(ParameterError, match="3 x 3"):
        check_correlation(np.eye(2), size=3)


def test_df_rules() -> None:
    with pytest.raises(ParameterError) as info:
        Copula(kind="student_t", correlation=np.eye(2))
    assert info.value.parameter == "portfolio.dependence.df"
    with pytest.raises(ParameterError, match="no degrees"):
        Copula(kind="gaussian", correlation=np.eye(2), df=3.0)
    with pytest.raises(ParameterError, match="> 0"):
        Copula(kind="student_t", correlation=np.eye(2), df=-1.0)


def test_factor_reproduces_psd_and_singular_matrices() -> None:
    pd = np.array([[1.0, 0.5, 0.2], [0.5, 1.0, 0.3], [0.2, 0.3, 1.0]])
    ones = np.ones((3, 3))  # comonotone: rank one, Cholesky fails
    for r in (pd, ones):
        f = correlation_factor(check_correlation(r))
        np.testing.assert_allclose(f @ f.T, r, atol=1e-12)


def test_same_rng_same_draws() -> None:
    c = Copula(kind="student_t", correlation=np.array([[1.0, 0.4], [0.4, 1.0]]), df=4.0)
    a = c.sample(100, np.random.default_rng(np.random.SeedSequence(5, spawn_key=(1, 2, 3))))
    b = c.sample(100, np.random.default_rng(np.random.SeedSequence(5, spawn_key=(1, 2, 3))))
    np.testing.assert_array_equal(a.u, b.u)


def _box_check(c: Copula, cdf: float, n: int = 200_000) -> None:
    d = c.sample(n, np.random.default_rng(11))
    inside = np.all(d.u <= 0.3, axis=1) if c.dim else None
    assert inside is not None
    p = float(inside.mean())
    se = math.sqrt(cdf * (1 - cdf) / n)
    assert abs(p - cdf) <= 4 * se, (p, cdf, se)


def test_gaussian_copula_zero_correlation_matches_multivariate_normal_cdf() -> None:
    # scipy.stats.multivariate_normal.cdf: with R = I the box probability is 0.3^3.
    c = Copula(kind="gaussian", correlation=np.eye(3))
    ref = float(stats.multivariate_normal(mean=np.zeros(3), cov=np.eye(3)).cdf(
        np.full(3, stats.norm.ppf(0.3))))
    assert ref == pytest.approx(0.3**3, rel=1e-4)
    _box_check(c, ref)


def test_gaussian_copula_correlated_matches_multivariate_normal_cdf() -> None:
    r = np.array([[1.0, 0.6, 0.3], [0.6, 1.0, 0.5], [0.3, 0.5, 1.0]])
    ref = float(stats.multivariate_normal(mean=np.zeros(3), cov=r).cdf(
        np.full(3, stats.norm.ppf(0.3))))  # scipy's Genz integration
    _box_check(Copula(kind="gaussian", correlation=r), ref)


def test_student_t_copula_matches_multivariate_t_cdf() -> None:
    r = np.array([[1.0, 0.5], [0.5, 1.0]])
    q = float(stats.t.ppf(0.3, 4.0))
    ref = float(stats.multivariate_t(loc=np.zeros(2), shape=r, df=4.0).cdf(
        np.full(2, q), random_state=3))  # scipy's multivariate t cdf
    _box_check(Copula(kind="student_t", correlation=r, df=4.0), ref)
