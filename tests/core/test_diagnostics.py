"""Tests of core.diagnostics: k-hat, the mergeable accumulator and the trust verdict."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from core import intervals
from core.diagnostics import ContributionStats, pareto_khat, psis_tail_size
from core.errors import ParameterError

CHUNK = 8192


def accumulate(values: np.ndarray, chunk: int = CHUNK, top_k: int = 1024) -> ContributionStats:
    """Split (m, T) values into chunks in order and merge them."""
    parts = [
        ContributionStats.from_samples(values[i : i + chunk], top_k=top_k, chunk=c)
        for c, i in enumerate(range(0, values.shape[0], chunk))
    ]
    return ContributionStats.combine(parts)


def draws(seed: int, rows: int, columns: int = 1) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal((rows, columns))


# --- k-hat ------------------------------------------------------------------------------
@pytest.mark.parametrize("shape", [0.2, 0.5, 1.0])
def test_khat_recovers_the_shape_of_generalized_pareto_draws(shape: float) -> None:
    n = 100_000
    m = psis_tail_size(n)  # 949
    # Exceedances of a GPD over an order statistic are again GPD with the same shape
    # (threshold stability), so the top m of scipy.stats.genpareto draws have shape `shape`.
    # PSIS shrinks towards 0.5 by 10 pseudo-points, so the target is the shrunk shape.
    target = (m * shape + 10 * 0.5) / (m + 10)
    # Asymptotic sd of the (near-efficient) estimator: (1 + k)/sqrt(M) (Zhang & Stephens 2009,
    # the maximum-likelihood variance (1+k)^2/M, from memory); tolerance 4 sd per fit.
    sd = (1 + shape) / math.sqrt(m)
    fits = []
    for seed in range(5):
        x = stats.genpareto.rvs(shape, size=n, random_state=np.random.default_rng(seed))
        top = np.sort(x)[::-1][: m + 1]
        fits.append(pareto_khat(top[:m], float(top[m])))
    assert all(abs(k - target) < 4 * sd for k in fits), fits
    assert abs(np.mean(fits) - target) < 4 * sd / math.sqrt(len(fits))


def test_khat_does_not_depend_on_the_scale_of_the_contributions() -> None:
    # A GPD is a scale family, so the shape fit must not move when values are 1e-300 times
    # smaller (and 1/max(x) must not overflow on the way).
    x = stats.genpareto.rvs(0.5, size=500, random_state=np.random.default_rng(7))
    k_unit = pareto_khat(x, 0.0)
    assert pareto_khat(x * 1e-300, 0.0) == pytest.approx(k_unit, rel=1e-9)
    assert pareto_khat(x * 1e-300 + 3e-300, 3e-300) == pytest.approx(k_unit, abs=1e-6)


def test_khat_rejects_tails_it_cannot_fit() -> None:
    with pytest.raises(ParameterError, match="tail_values"):
        pareto_khat(np.array([1.0, 2.0]), 1.5)  # a value below the threshold
    with pytest.raises(ParameterError, match="tail_values"):
        pareto_khat(np.full(10, 2.0), 2.0)  # nothing above the threshold
    with pytest.raises(ParameterError, match="threshold"):
        pareto_khat(np.array([1.0, 2.0]), math.nan)


def test_psis_tail_size_follows_the_published_rule() -> None:
    # M = ceil(min(0.2 S, 3 sqrt(S))) (Vehtari et al., JMLR 2024, independent draws).
    assert [psis_tail_size(s) for s in (0, 20, 100, 10_000, 100_000)] == [0, 4, 20, 300, 949]
    with pytest.raises(ParameterError, match="n"):
        psis_tail_size(-1)


# --- accumulator against numpy ------------------------------------------------------------
def mixed_contributions(seed: int, rows: int) -> np.ndarray:
    """Three columns: lognormal weights, weights times a 10% indicator, uniform values."""
    rng = np.random.default_rng(seed)
    w = np.exp(0.8 * rng.standard_normal(rows))
    return np.column_stack([w, w * (rng.random(rows) < 0.1), rng.random(rows)])


def test_merged_chunks_match_numpy_on_the_whole_array() -> None:
    values = mixed_contributions(1, 50_000)
    acc = accumulate(values, chunk=3_000, top_k=64)  # 17 chunks, the last one short
    n = values.shape[0]
    np.testing.assert_allclose(acc.mean(), values.mean(axis=0), rtol=1e-13)
    np.testing.assert_allclose(
        acc.std_error(), values.std(axis=0, ddof=1) / math.sqrt(n), rtol=1e-12
    )
    kish = values.sum(axis=0) ** 2 / (values**2).sum(axis=0)
    np.testing.assert_allclose(acc.effective_samples(), kish, rtol=1e-12)
    assert acc.n == n
    np.testing.assert_array_equal(acc.hits, np.count_nonzero(values, axis=0))
    np.testing.assert_array_equal(acc.maximum, values.max(axis=0))
    np.testing.assert_array_equal(acc.top, np.sort(values, axis=0)[::-1][:64])
    sums = np.add.reduceat(values, np.arange(0, n, 3_000), axis=0)
    chunk_sums = np.ldexp(acc.chunk_mean * acc.chunk_count[:, None], acc.chunk_exponent)
    np.testing.assert_allclose(chunk_sums, sums, rtol=1e-13)
    np.testing.assert_array_equal(acc.chunk_count[:-1], 3_000)


def test_merge_order_and_grouping_do_not_change_the_result() -> None:
    values = mixed_contributions(2, 40_000)
    parts = [
        ContributionStats.from_samples(values[i : i + 2_500], top_k=100, chunk=c)
        for c, i in enumerate(range(0, 40_000, 2_500))
    ]
    in_order = ContributionStats.combine(parts)
    shuffled = [parts[i] for i in np.random.default_rng(0).permutation(len(parts))]
    chained = shuffled[0]
    for p in shuffled[1:]:
        chained = ContributionStats.combine([p, chained])
    pairs = [ContributionStats.combine(shuffled[i:i + 2]) for i in range(0, len(shuffled), 2)]
    tree = ContributionStats.combine(pairs)
    for other in (chained, tree):
        # Bit-identical: totals are recomputed from the chunk records in chunk order.
        np.testing.assert_array_equal(other.mean(), in_order.mean())
        np.testing.assert_array_equal(other.std_error(), in_order.std_error())
        np.testing.assert_array_equal(other.top, in_order.top)
        np.testing.assert_array_equal(other.chunk_index, np.arange(len(parts)))
        assert other.diagnose() == in_order.diagnose()


@pytest.mark.parametrize("scale", [1e-200, 1e-300])
def test_tiny_contributions_keep_their_relative_error(scale: float) -> None:
    u = np.exp(0.5 * draws(3, 30_000, 2))
    acc = accumulate(u * scale, chunk=4_000)
    # Reference: the same figures of the unscaled values (numpy), times the scale.
    se_unit = u.std(axis=0, ddof=1) / math.sqrt(u.shape[0])
    se = acc.std_error()
    assert np.all(np.isfinite(se)) and np.all(se > 0)
    np.testing.assert_allclose(se / acc.mean(), se_unit / u.mean(axis=0), rtol=1e-10)
    np.testing.assert_allclose(
        acc.effective_samples(), u.shape[0] / (1 + (u.var(0) / u.mean(0) ** 2)), rtol=1e-10
    )


def test_chunks_of_very_different_magnitude_merge_exactly() -> None:
    # One chunk near 1e-100, one near 1e-250: squares of the second underflow in float64.
    u = np.exp(0.5 * draws(4, 2_000))
    big, small = u[:1_000] * 1e-100, u[1_000:] * 1e-250
    acc = ContributionStats.combine([
        ContributionStats.from_samples(small, chunk=1), ContributionStats.from_samples(big, chunk=0)
    ])
    # numpy reference in units of 1e-100, where everything stays representable.
    ref = np.concatenate([big, small]) * 1e100
    np.testing.assert_allclose(acc.mean() * 1e100, ref.mean(axis=0), rtol=1e-13)
    np.testing.assert_allclose(
        acc.std_error() * 1e100, ref.std(axis=0, ddof=1) / math.sqrt(2_000), rtol=1e-12
    )


def test_variance_of_nearly_constant_contributions_does_not_cancel() -> None:
    # 1e-30 (1 + 1e-8 u): a raw sum-of-squares formula loses all digits of the variance here.
    u = np.random.default_rng(5).random((20_000, 1))
    values = 1e-30 * (1 + 1e-8 * u)
    acc = accumulate(values, chunk=3_000)
    ref = values.std(axis=0, ddof=1) / math.sqrt(values.shape[0])  # numpy two-pass
    np.testing.assert_allclose(acc.std_error(), ref, rtol=1e-6)


def test_interval_is_the_normal_interval_clipped_to_its_range() -> None:
    values = np.ones((40, 2))
    values[::2, 0] = 0.0  # mean 0.5
    values[:2, 1] = 0.0  # mean 0.95, whose normal interval reaches past 1
    acc = ContributionStats.from_samples(values)
    z = stats.norm.ppf(0.975)  # 1.959964 (scipy)
    assert intervals.Z95 == pytest.approx(z, rel=1e-15)
    mean, se = acc.mean(), acc.std_error()
    for j in range(2):
        low, high = intervals.normal(float(mean[j]), float(se[j]), upper=1.0)
        assert low == pytest.approx(max(mean[j] - z * se[j], 0.0), rel=1e-15)
        assert high == pytest.approx(min(mean[j] + z * se[j], 1.0), rel=1e-15)
    assert intervals.normal(float(mean[1]), float(se[1]), upper=1.0)[1] == 1.0
    assert mean[1] + z * se[1] > 1.0


# --- verdicts -------------------------------------------------------------------------------
def test_no_hits_gives_a_one_sided_bound_and_an_unreliable_verdict() -> None:
    n = 100_000
    acc = accumulate(np.zeros((n, 1)))
    (d,) = acc.diagnose()
    assert not d.reliable and "no sample reached the event" in d.reason
    assert d.pareto_k is None and d.largest_share is None and d.effective_samples == 0.0
    high = intervals.no_hit_upper(acc.n)
    # Rule of three: no event in n draws bounds p by about 3/n at 95% (Hanley & Lippman-Hand,
    # JAMA 1983, from memory); exactly 1 - 0.05**(1/n), the Clopper-Pearson bound for zero hits
    # (scipy's beta quantile).
    assert high == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-12)
    assert high == pytest.approx(float(stats.beta.ppf(0.95, 1, n)), rel=1e-9)
    assert high == pytest.approx(3 / n, rel=0.01)
    # and for hits, the two-sided exact interval is scipy's binomtest's (Clopper-Pearson)
    ci = stats.binomtest(7, 1000).proportion_ci(confidence_level=0.95, method="exact")
    low7, high7 = intervals.clopper_pearson(7, 1000)
    assert (low7, high7) == pytest.approx((ci.low, ci.high), rel=1e-9)


def test_crude_monte_carlo_with_five_hits_is_unreliable() -> None:
    values = np.zeros((100_000, 1))
    values[np.random.default_rng(8).choice(100_000, 5, replace=False)] = 1.0
    (d,) = accumulate(values).diagnose()
    # Fewer than 10 events is too few for a normal interval (common practice).
    assert not d.reliable and "only 5 samples" in d.reason
    assert d.effective_samples == pytest.approx(5.0)  # Kish ESS of 5 equal weights


@pytest.mark.parametrize("seed", range(8))
def test_heavy_lognormal_weights_are_flagged_by_khat(seed: int) -> None:
    sigma = 3.0
    w = np.exp(sigma * draws(seed, 13 * CHUNK))
    acc = accumulate(w)
    (d,) = acc.diagnose()
    assert d.pareto_k is not None and d.pareto_k > 0.7
    assert not d.reliable and "k-hat" in d.reason
    # The flag is deserved: the true relative variance of exp(sigma Z) is exp(sigma^2) - 1 =
    # 8102 (lognormal moments, closed form); E[w^2] is made by Z near 2 sigma = 6, which 1e5
    # draws never reach, so the reported relative variance falls well short of it.
    reported = float(acc.std_error()[0] ** 2 * acc.n / acc.mean()[0] ** 2)
    assert reported < math.expm1(sigma**2)


@pytest.mark.parametrize("seed", range(4))
def test_pareto_contributions_with_shape_0_6_are_kept_but_said_to_converge_slowly(
    seed: int,
) -> None:
    # GPD with shape 0.6 (scipy.stats.genpareto): finite mean, infinite variance (variance needs
    # shape < 1/2, closed form). k-hat (sd ~ 1.6/sqrt(979) = 0.05) lands in (0.5, 0.7).
    w = stats.genpareto.rvs(0.6, size=13 * CHUNK, random_state=np.random.default_rng(seed))
    (d,) = accumulate(w[:, None]).diagnose()
    assert d.pareto_k is not None and 0.5 < d.pareto_k <= 0.7
    assert d.reliable and d.reason.startswith("converges slowly")


def test_one_dominant_sample_is_flagged_by_its_share() -> None:
    values = np.random.default_rng(9).random((20_000, 1))
    values[123, 0] = 0.2 * values.sum()  # one sample with 1/6 of the new total
    (d,) = accumulate(values, chunk=2_000).diagnose()
    assert d.largest_share == pytest.approx(values.max() / values.sum(), rel=1e-12)
    assert not d.reliable and "one sample carries 17% of the total" in d.reason


@pytest.mark.parametrize(
    "make",
    [
        lambda rng, n: rng.random(n),  # uniform
        lambda rng, n: np.exp(0.3 * rng.standard_normal(n)),  # light lognormal weights
        lambda rng, n: (rng.random(n) < 0.01).astype(float),  # crude MC, ~1000 hits
    ],
    ids=["uniform", "lognormal-0.3", "indicator"],
)
def test_well_behaved_contributions_pass_in_19_of_20_seeds(make) -> None:
    verdicts = []
    for seed in range(20):
        values = make(np.random.default_rng(100 + seed), 13 * CHUNK)[:, None]
        verdicts.append(accumulate(values).diagnose()[0])
    assert sum(d.reliable and d.reason == "ok" for d in verdicts) >= 19, verdicts


@pytest.mark.parametrize(("chunks", "size", "groups"), [(32, 2_048, 32), (100, 512, 25)])
def test_batch_ratio_follows_its_chi_square_law_for_independent_chunks(
    chunks: int, size: int, groups: int
) -> None:
    # Batch means of G groups of iid samples: (G-1) ratio^2 ~ chi2(G-1), so E[ratio^2] = 1 and
    # sd(ratio^2) = sqrt(2/(G-1)) (batch-means method); averaged over 20 seeds, tolerance 4 sd.
    squares = []
    for seed in range(20):
        w = np.exp(0.3 * draws(200 + seed, chunks * size))
        (d,) = accumulate(w, chunk=size).diagnose()
        assert d.batch_ratio is not None
        squares.append(d.batch_ratio**2)
    assert abs(np.mean(squares) - 1) < 4 * math.sqrt(2 / (groups - 1) / len(squares))


def test_batch_ratio_flags_chunks_that_share_a_common_error() -> None:
    # Every chunk scaled by its own factor 1 + 0.2 N(0,1) (like chunks drawn from one reused
    # seed state): chunk means then vary far more than the per-sample variance predicts.
    rng = np.random.default_rng(10)
    w = np.exp(0.3 * rng.standard_normal((16, CHUNK)))
    w *= 1 + 0.2 * rng.standard_normal((16, 1))
    (d,) = accumulate(w.reshape(-1, 1)).diagnose()
    assert d.batch_ratio is not None and d.batch_ratio > 5
    assert not d.reliable and "batch" in d.reason


def test_too_few_chunks_give_no_batch_ratio() -> None:
    (d,) = accumulate(np.exp(0.3 * draws(11, 7 * 1_000)), chunk=1_000).diagnose()
    assert d.batch_ratio is None and d.reliable


@pytest.mark.parametrize(
    "values",
    [
        np.zeros((50, 1)),
        np.ones((50, 1)),
        np.full((30, 1), 1e-300),
        np.array([[0.0], [2.0]]),
        np.array([[5e-324], [0.0], [1e-320]]),
    ],
    ids=["zeros", "ones", "tiny-constant", "one-hit", "subnormal"],
)
def test_diagnostics_hold_only_finite_python_floats_or_none(values: np.ndarray) -> None:
    (d,) = ContributionStats.from_samples(values).diagnose()
    for name in ("pareto_k", "effective_samples", "largest_share", "batch_ratio"):
        x = getattr(d, name)
        assert x is None or (type(x) is float and math.isfinite(x)), (name, x)
    assert isinstance(d.reliable, bool) and d.reason


def test_invalid_inputs_raise_errors_naming_the_argument() -> None:
    good = ContributionStats.from_samples(np.ones((4, 2)))
    for bad in (np.array([[1.0, -1.0]]), np.array([[np.nan, 1.0]]), np.array([[np.inf, 1.0]])):
        with pytest.raises(ParameterError, match="values"):
            ContributionStats.from_samples(bad)
    with pytest.raises(ParameterError, match="values"):
        ContributionStats.from_samples(np.ones(5))
    with pytest.raises(ParameterError, match="top_k"):
        ContributionStats.from_samples(np.ones((4, 2)), top_k=0)
    with pytest.raises(ParameterError, match="chunk"):
        ContributionStats.combine([good, ContributionStats.from_samples(np.ones((4, 2)))])
    with pytest.raises(ParameterError, match="top_k"):
        ContributionStats.combine(
            [good, ContributionStats.from_samples(np.ones((4, 2)), top_k=8, chunk=1)])
    with pytest.raises(ParameterError, match="values"):
        ContributionStats.combine([good, ContributionStats.from_samples(np.ones((4, 3)), chunk=1)])


@pytest.mark.parametrize("zero_share", [0.0, 0.6, 0.99, 1.0])
def test_largest_entries_match_a_full_sort_whatever_the_share_of_zeros(zero_share):
    # Reference: a full descending sort of each row (numpy), cut at k. The sparse path
    # (mostly zeros: tail indicators) must give the same entries to the bit.
    from core.chunk_summary import largest

    rng = np.random.default_rng(7)
    rows = rng.pareto(1.5, size=(40, 3000))
    rows[rng.random(rows.shape) < zero_share] = 0.0
    rows[0, :9] = rows[0, 9]  # ties among the non-zero entries too
    expected = -np.sort(-rows, axis=1)[:, :1024]
    assert np.array_equal(largest(rows, 1024), expected)


@pytest.mark.parametrize("zero_share", [0.0, 0.6, 0.99, 1.0])
def test_a_chunk_mostly_of_zeros_has_numpys_mean_and_variance(zero_share):
    # Reference: numpy's mean and variance of each column (ddof=1). A chunk with more than half
    # zeros is summarised from its non-zero entries only (core.chunk_summary): its figures must
    # agree to rounding, and its hits, maximum and largest entries exactly.
    rng = np.random.default_rng(11)
    v = rng.lognormal(0.0, 2.0, size=(5000, 7)) * 1e-150
    v[rng.random(v.shape) < zero_share] = 0.0
    s = ContributionStats.from_samples(v, top_k=64)
    np.testing.assert_allclose(s.mean(), v.mean(axis=0), rtol=1e-12, atol=0)
    std_error = v.std(axis=0, ddof=1) / math.sqrt(v.shape[0])
    np.testing.assert_allclose(s.std_error(), std_error, rtol=1e-10, atol=0)
    assert np.array_equal(s.hits, np.count_nonzero(v, axis=0))
    assert np.array_equal(s.maximum, v.max(axis=0))
    assert np.array_equal(s.top, -np.sort(-v, axis=0)[:64])


def test_a_mostly_zero_chunk_with_a_negative_or_nan_entry_is_refused():
    v = np.zeros((100, 3))
    v[5, 1] = -1.0
    with pytest.raises(ParameterError):
        ContributionStats.from_samples(v)
    v[5, 1] = math.nan
    with pytest.raises(ParameterError):
        ContributionStats.from_samples(v)
    v[5, 1] = math.inf
    with pytest.raises(ParameterError):
        ContributionStats.from_samples(v)
