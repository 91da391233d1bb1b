"""How far a Monte Carlo error bar can be trusted.

Every estimator here averages non-negative per-sample contributions w_i (likelihood ratio times
indicator, or a conditional probability). A small reported relative error means little when the
w_i are heavy-tailed: the sample variance then misses the rare large contributions that have not
been drawn yet. `ContributionStats` accumulates, chunk by chunk, what is needed to say so:

- mean and standard error (exact merges of per-chunk means and centred sums of squares),
- hits (non-zero contributions), the largest contribution and the K largest ones,
- per-chunk means and counts for a batch-means check.

`diagnose()` turns these into `core.results.Diagnostics`: Pareto k-hat of the largest
contributions (Zhang & Stephens 2009, as used by Pareto-smoothed importance sampling, Vehtari,
Simpson, Gelman, Yao & Gabry, JMLR 2024), Kish effective sample size, the largest share, and
the batch ratio.

Underflow: contributions of 1e-200 have squares of 1e-400, which is 0 in float64. Each chunk
therefore stores its means and sums of squares in units of a power of two (the chunk's maximum
rounded up), so scaling is exact and squares stay near 1; merges bring chunks to a common power.

Determinism: merging only concatenates per-chunk records, kept sorted by chunk index, and every
total is recomputed from them in chunk order. The result depends on the set of chunks only, not
on the order or grouping of merges, so the same seed gives bit-identical answers for any number
of workers.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property, lru_cache
from typing import NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import special, stats

from core import chunk_summary
from core.errors import ParameterError
from core.results import Diagnostics

__all__ = [
    "ContributionStats",
    "pareto_khat",
    "psis_tail_size",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

# --- verdict thresholds (reasons in `ContributionStats.diagnose`) ---------------------------
MIN_HITS = 10  # below this a hit count is too Poisson-skewed for a normal interval
MIN_HITS_FOR_KHAT = 20  # gives a Pareto fit of at least psis_tail_size(20) = 4 points
KHAT_SLOW = 0.5  # above: the contributions may have infinite variance (GPD variance needs k < 1/2)
KHAT_MAX = 0.7  # above: the PSIS paper finds error estimates unusable in practice
MAX_SHARE = 0.1  # one sample carrying more than a tenth of the total
MIN_EFFECTIVE = 30.0  # sd of a variance from 30 samples ~ sqrt(2/30): SE known to about +-13%
MIN_BATCHES = 8
MAX_BATCHES = 32  # more chunks are grouped into 17..32 equal groups in chunk order
BATCH_FALSE_ALARM = 1e-4  # two-sided chance that a healthy estimate fails the batch check

# PSIS weakly informative prior on the shape: M fitted points pulled towards k = 0.5 as if by 10
# pseudo-observations, k = (M k + 10 * 0.5) / (M + 10).
_PRIOR_POINTS = 10.0
_PRIOR_SHAPE = 0.5
# Zhang & Stephens: the posterior mean of theta is a quadrature over m = MIN_GRID + floor(sqrt(M))
# quantiles of a prior with this weight; PSIS uses 30 grid points where the 2009 paper used 20.
_MIN_GRID = 30
_GRID_PRIOR = 3.0


# --- Pareto tail shape ----------------------------------------------------------------------
def psis_tail_size(n: int) -> int:
    """Number M of largest values the PSIS diagnostic fits: ceil(min(0.2 n, 3 sqrt(n))).

    This is the PSIS rule for independent draws (relative efficiency 1).
    """
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 0:
        raise ParameterError("n", f"must be a non-negative integer, got {n!r}")
    return math.ceil(min(0.2 * n, 3.0 * math.sqrt(n)))


def pareto_khat(tail_values: np.ndarray, threshold: float) -> float:
    """Generalized Pareto shape k-hat of `tail_values - threshold`, PSIS style.

    Zhang & Stephens (2009) empirical-Bayes estimate (posterior mean of theta = -k/sigma over a
    quadrature grid, then k from the profile), followed by the PSIS weakly informative prior
    adjustment k = (M k + 10 * 0.5) / (M + 10), which is applied here. k-hat does not depend on
    the scale of the data; exceedances are divided by their maximum first so that values near
    1e-300 fit as well as values near 1.
    """
    x = np.asarray(tail_values, dtype=np.float64).ravel()
    if x.size < 2:
        raise ParameterError("tail_values", f"need at least 2 values to fit a tail, got {x.size}")
    if not math.isfinite(threshold):
        raise ParameterError("threshold", f"must be finite, got {threshold!r}")
    if not np.all(np.isfinite(x)):
        raise ParameterError("tail_values", "must be finite")
    x = np.sort(x - threshold)
    if x[0] < 0:
        raise ParameterError("tail_values", "every value must be at least the threshold")
    if x[-1] <= 0:
        raise ParameterError("tail_values", "all values equal the threshold: no tail to fit")
    k = _zhang_stephens_shape(x / x[-1])
    m = x.size
    return float((m * k + _PRIOR_POINTS * _PRIOR_SHAPE) / (m + _PRIOR_POINTS))


def _zhang_stephens_shape(x: FloatArray) -> float:
    """Unadjusted Zhang-Stephens shape of sorted exceedances x >= 0 with max(x) = 1."""
    n = x.size
    m = _MIN_GRID + int(math.sqrt(n))
    # Grid of theta < 1/max(x) from the quantiles of their prior, scaled by the first quartile.
    quartile = _first_quartile(x)
    if quartile <= 0:  # many exceedances tie at the threshold: use the positive ones
        quartile = _first_quartile(x[x > 0])
    j = np.arange(1, m + 1, dtype=np.float64)
    theta = 1.0 / x[-1] + (1.0 - np.sqrt(m / (j - 0.5))) / (_GRID_PRIOR * quartile)
    with np.errstate(divide="ignore", invalid="ignore"):
        # For each theta the shape maximising the likelihood is mean(log1p(-theta x)) and the
        # profile log-likelihood is n (log(-theta / k) - k - 1).
        k = np.log1p(-theta[:, None] * x[None, :]).mean(axis=1)
        profile = n * (np.log(-theta / k) - k - 1.0)
    profile = np.where(np.isfinite(profile), profile, -np.inf)
    weights = special.softmax(profile)
    theta_hat = float(weights @ theta)
    return float(np.mean(np.log1p(-theta_hat * x)))


def _first_quartile(sorted_x: FloatArray) -> float:
    # Zhang & Stephens use the order statistic at floor(n/4 + 0.5) (1-based).
    return float(sorted_x[max(int(sorted_x.size / 4 + 0.5) - 1, 0)])


# --- accumulator ----------------------------------------------------------------------------
class _Totals(NamedTuple):
    exponent: IntArray  # (T,) common power of two of every scaled figure below
    chunk_means: FloatArray  # (B, T) chunk means in units of 2**exponent
    mean: FloatArray  # (T,) overall mean, same units
    m2: FloatArray  # (T,) sum of squared deviations, units of 4**exponent


@dataclass(frozen=True, kw_only=True, eq=False)
class ContributionStats:
    """Mergeable summary of the contributions of T estimates (one column each).

    n is shared by all T estimates (they come from the same draws). Per-chunk records
    (index, count, scaled mean, scaled centred sum of squares, power-of-two exponent) are kept
    sorted by chunk index; memory is O(chunks * T) plus the top_k largest values per estimate.
    Build with `from_samples` and `merge`/`combine`, not directly.
    """

    top_k: int
    n: int
    hits: IntArray  # (T,) number of non-zero contributions
    maximum: FloatArray  # (T,)
    top: FloatArray  # (min(top_k, n), T) the largest contributions, descending
    chunk_index: IntArray  # (B,) ascending
    chunk_count: IntArray  # (B,)
    chunk_mean: FloatArray  # (B, T) in units of 2**chunk_exponent
    chunk_m2: FloatArray  # (B, T) in units of 4**chunk_exponent
    chunk_exponent: IntArray  # (B, T)

    # -- building --
    @classmethod
    def from_samples(
        cls, values: np.ndarray, *, top_k: int = 1024, chunk: int = 0
    ) -> ContributionStats:
        """Summarise one chunk: `values` has shape (m, T), one column per estimate.

        `chunk` is this chunk's index in the chunk plan; merges order the batch records by it,
        so chunks may be merged in any order. Each chunk must have its own index.
        """
        v = np.asarray(values, dtype=np.float64)
        if v.ndim != 2 or v.shape[0] < 1 or v.shape[1] < 1:
            raise ParameterError("values", f"must have shape (samples, estimates), got {v.shape}")
        _check_count("top_k", top_k, minimum=1)
        _check_count("chunk", chunk, minimum=0)
        c = chunk_summary.summarise(v, int(top_k))
        if c is None:
            raise ParameterError("values", "contributions must be finite and non-negative")
        return cls(
            top_k=int(top_k),
            n=int(v.shape[0]),
            hits=c.hits,
            maximum=c.maximum,
            top=c.top,
            chunk_index=np.array([chunk], dtype=np.int64),
            chunk_count=np.array([v.shape[0]], dtype=np.int64),
            chunk_mean=c.mean[None, :],
            chunk_m2=c.m2[None, :],
            chunk_exponent=c.exponent[None, :],
        )

    @classmethod
    def combine(cls, parts: Sequence[ContributionStats]) -> ContributionStats:
        """Merge accumulators of disjoint chunks; the result does not depend on their order."""
        if len(parts) == 0:
            raise ParameterError("parts", "need at least one accumulator")
        first = parts[0]
        for p in parts[1:]:
            if p.top_k != first.top_k:
                raise ParameterError("top_k", f"cannot merge top_k {p.top_k} with {first.top_k}")
            if p.hits.shape != first.hits.shape:
                raise ParameterError(
                    "values", f"cannot merge {p.hits.size} estimates with {first.hits.size}"
                )
        index = np.concatenate([p.chunk_index for p in parts])
        order = np.argsort(index, kind="stable")
        index = index[order]
        repeated = index[1:][index[1:] == index[:-1]]
        if repeated.size:
            raise ParameterError(
                "chunk",
                f"chunk index {int(repeated[0])} appears twice; give every chunk its own index",
            )

        def stacked(name: str) -> np.ndarray:
            return np.concatenate([getattr(p, name) for p in parts])[order]

        return cls(
            top_k=first.top_k,
            n=sum(p.n for p in parts),
            hits=np.sum([p.hits for p in parts], axis=0),
            maximum=np.max([p.maximum for p in parts], axis=0),
            top=chunk_summary.largest(np.concatenate([p.top for p in parts]).T,
                                     first.top_k).T.copy(),
            chunk_index=index,
            chunk_count=stacked("chunk_count"),
            chunk_mean=stacked("chunk_mean"),
            chunk_m2=stacked("chunk_m2"),
            chunk_exponent=stacked("chunk_exponent"),
        )

    # -- totals --
    @cached_property
    def _totals(self) -> _Totals:
        # Bring every chunk to the largest exponent per estimate (exact powers of two), then
        # combine by the between/within decomposition of the sum of squares, in chunk order.
        exponent = self.chunk_exponent.max(axis=0)
        factor = np.ldexp(1.0, self.chunk_exponent - exponent)
        means = self.chunk_mean * factor
        counts = self.chunk_count.astype(np.float64)[:, None]
        mean = (counts * means).sum(axis=0) / self.n
        m2 = (self.chunk_m2 * factor * factor).sum(axis=0) + (counts * (means - mean) ** 2).sum(
            axis=0
        )
        return _Totals(exponent=exponent, chunk_means=means, mean=mean, m2=m2)

    @property
    def estimates(self) -> int:
        """Number T of estimates summarised."""
        return int(self.hits.size)

    def mean(self) -> FloatArray:
        """The estimates: mean contribution per column, shape (T,)."""
        t = self._totals
        return np.ldexp(t.mean, t.exponent)

    def std_error(self) -> FloatArray:
        """sqrt(sample variance (ddof=1) / n) per estimate, computed in scaled units."""
        if self.n < 2:
            raise ParameterError("values", "a standard error needs at least 2 samples")
        t = self._totals
        return np.ldexp(np.sqrt(t.m2 / (self.n - 1) / self.n), t.exponent)

    def effective_samples(self) -> FloatArray:
        """Kish effective sample size (sum w)^2 / sum w^2 per estimate; 0 when all w are 0."""
        t = self._totals
        total = self.n * t.mean
        squares = t.m2 + self.n * t.mean**2
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(squares > 0, total**2 / squares, 0.0)

    # -- diagnostics --
    def diagnose(self) -> list[Diagnostics]:
        """One `Diagnostics` per estimate. Rules, in order:

        - no hits: unreliable, the interval is only a one-sided bound;
        - fewer than MIN_HITS (10) hits: unreliable (the count is too skewed for a normal
          interval; the other checks are not reported as they follow from it);
        - k-hat > 0.7 (PSIS threshold): unreliable; 0.5 < k-hat <= 0.7 stays reliable with the
          reason "converges slowly" (the contributions may have infinite variance);
          k-hat is fitted to the top M = psis_tail_size(hits) (at most top_k - 1) contributions
          above the next one, and is None below MIN_HITS_FOR_KHAT (20) hits or when those
          contributions are all equal (e.g. indicators: there is no tail to fit);
        - largest share > 0.1: unreliable;
        - Kish effective samples < 30: unreliable (the SE's own relative spread is ~
          sqrt(1/(2 * ESS)), 13% at 30);
        - batch ratio outside its chi-square band: unreliable. With G batches (chunks, or 17-32
          equal groups of chunks in chunk order) and independent samples, (G-1) ratio^2 is
          chi-square with G-1 degrees of freedom (batch means approximately normal, the reported
          SE far more precise than the batch one). The band is the central 1 - 1e-4 of that law,
          about 1 +- 3.9 / sqrt(2 (G-1)) (the ratio's relative spread is 1/sqrt(2 (G-1))).
          A ratio outside it means the chunks are not independent or the variance is wrong.
          None with fewer than 8 chunks.
        """
        t = self._totals
        ess = self.effective_samples()
        total = self.n * t.mean
        largest = np.ldexp(self.maximum, -t.exponent)
        ratio, batches = self._batch_ratio()
        return [
            _verdict(
                hits=int(self.hits[j]),
                pareto_k=self._pareto_k(j),
                effective=float(ess[j]),
                share=float(largest[j] / total[j]) if total[j] > 0 else None,
                ratio=_finite_or_none(ratio[j]),
                batches=batches,
            )
            for j in range(self.estimates)
        ]

    def _pareto_k(self, j: int) -> float | None:
        hits = int(self.hits[j])
        if hits < MIN_HITS_FOR_KHAT:
            return None
        m = min(psis_tail_size(hits), self.top.shape[0] - 1)
        column = self.top[:, j]
        if m < 2 or column[0] <= column[m]:  # too few kept, or all equal: nothing to fit
            return None
        return _finite_or_none(pareto_khat(column[:m], float(column[m])))

    def _batch_ratio(self) -> tuple[FloatArray, int]:
        """Batch-means SE over reported SE per estimate (NaN where undefined), and G."""
        chunks = self.chunk_index.size
        if chunks < MIN_BATCHES or self.n < 2:
            return np.full(self.estimates, np.nan), 0
        t = self._totals
        size = -(-chunks // MAX_BATCHES)  # ceil: G = ceil(chunks / size) lies in 17..32
        starts = np.arange(0, chunks, size)
        counts = self.chunk_count.astype(np.float64)
        group_count = np.add.reduceat(counts, starts)[:, None]
        group_mean = np.add.reduceat(counts[:, None] * t.chunk_means, starts, axis=0) / group_count
        # Batch means with unequal counts: Var(mean_g) = sigma^2 / n_g, so weight by n_g.
        between = (group_count * (group_mean - t.mean) ** 2).sum(axis=0)
        groups = starts.size
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.sqrt((between / (groups - 1)) / (t.m2 / (self.n - 1)))
        return np.where(t.m2 > 0, ratio, np.nan), groups


def _verdict(
    *,
    hits: int,
    pareto_k: float | None,
    effective: float,
    share: float | None,
    ratio: float | None,
    batches: int,
) -> Diagnostics:
    def record(reliable: bool, reason: str) -> Diagnostics:
        return Diagnostics(
            pareto_k=pareto_k,
            effective_samples=effective,
            largest_share=share,
            batch_ratio=ratio,
            reliable=reliable,
            reason=reason,
        )

    if hits == 0:
        return record(False, "no sample reached the event; the interval is a one-sided bound")
    if hits < MIN_HITS:
        return record(
            False,
            f"only {hits} samples reached the event (fewer than {MIN_HITS}): "
            "too few for a normal interval",
        )
    problems = []
    if pareto_k is not None and pareto_k > KHAT_MAX:
        problems.append(
            f"tail of the contributions too heavy (k-hat {pareto_k:.2f} > {KHAT_MAX}): "
            "the variance estimate is not trustworthy"
        )
    if share is not None and share > MAX_SHARE:
        problems.append(
            f"one sample carries {share:.0%} of the total (more than {MAX_SHARE:.0%}): "
            "the estimate rests on a few samples"
        )
    if effective < MIN_EFFECTIVE:
        problems.append(
            f"only {effective:.1f} effective samples (fewer than {MIN_EFFECTIVE:.0f}): "
            "the standard error is itself too uncertain"
        )
    if ratio is not None:
        low, high = _batch_band(batches)
        if not low <= ratio <= high:
            problems.append(
                f"batch estimates disagree with the standard error (batch ratio {ratio:.2f} "
                f"outside {low:.2f}-{high:.2f} for {batches} batches): samples may not be "
                "independent or the variance is misjudged"
            )
    if problems:
        return record(False, "; ".join(problems))
    if pareto_k is not None and pareto_k > KHAT_SLOW:
        return record(
            True,
            f"converges slowly (k-hat {pareto_k:.2f} > {KHAT_SLOW}): the contributions may "
            "have infinite variance, so the error bar may be too narrow",
        )
    return record(True, "ok")


@lru_cache(maxsize=64)
def _batch_band(batches: int) -> tuple[float, float]:
    """Central 1 - BATCH_FALSE_ALARM range of sqrt(chi2_{G-1} / (G-1)); cached, as every
    estimate of a call asks for the same batch count and scipy's ppf is slow to call."""
    dof = batches - 1
    q = stats.chi2.ppf([BATCH_FALSE_ALARM / 2, 1 - BATCH_FALSE_ALARM / 2], dof)
    return float(math.sqrt(q[0] / dof)), float(math.sqrt(q[1] / dof))


def _check_count(name: str, value: object, *, minimum: int) -> None:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
        raise ParameterError(name, f"must be an integer >= {minimum}, got {value!r}")


def _finite_or_none(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None
