"""Claim-count fits from counts per period, with exposures: Poisson and negative binomial
maximum likelihood and the index-of-dispersion test of the Poisson.

With exposure e_t the count of period t has mean m e_t (m the rate per unit of exposure).
Poisson: m = sum n / sum e (closed form), standard error sqrt(m / sum e). Negative binomial
(NB2: variance mu + mu^2 / r, Cameron and Trivedi 2013): (m, r) by maximum likelihood on the
log scale with the observed-information covariance. The index of dispersion
D = sum (n_t - m e_t)^2 / (m e_t) is chi-square with T - 1 degrees of freedom under the
Poisson (Fisher 1950; Cochran 1954).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import special, stats

from core.errors import ParameterError
from core.fitting import mle
from core.fitting.data import Floats
from core.fitting.results import CountFit

MIN_PERIODS = 2


@dataclass(frozen=True, kw_only=True)
class CountReport:
    poisson: CountFit
    negative_binomial: CountFit | None
    dispersion_statistic: float
    dispersion_df: int
    dispersion_p_value: float
    exposure: float  # the exposure of the period the ready count law describes
    notes: list[str] = field(default_factory=list)


def _check(counts: Sequence[int], exposures: Sequence[float] | None) -> tuple[Floats, Floats]:
    if len(counts) < MIN_PERIODS:
        raise ParameterError("counts", f"needs at least {MIN_PERIODS} periods, got "
                             f"{len(counts)}")
    n = np.empty(len(counts))
    for i, c in enumerate(counts):
        if isinstance(c, bool) or not isinstance(c, int | float) or not math.isfinite(c) or (
                c < 0 or c != int(c)):
            raise ParameterError(f"counts[{i}]", f"must be an integer >= 0, got {c!r}")
        n[i] = float(c)
    if n.sum() <= 0:
        raise ParameterError("counts", "are all zero: no claim rate can be fitted")
    e = np.ones(n.size)
    if exposures is not None:
        if len(exposures) != n.size:
            raise ParameterError("exposures", f"must have one entry per period ({n.size}), "
                                 f"got {len(exposures)}")
        for i, v in enumerate(exposures):
            if isinstance(v, bool) or not isinstance(v, int | float) or not (
                    math.isfinite(v) and v > 0):
                raise ParameterError(f"exposures[{i}]", f"must be a finite number > 0, got {v!r}")
            e[i] = float(v)
    return n, e


def _nb_loglik(n: Floats, e: Floats, m: float, r: float) -> float:
    mu = m * e
    value = (special.gammaln(n + r) - special.gammaln(r) - special.gammaln(n + 1)
             + r * np.log(r / (r + mu)) + n * np.log(mu / (r + mu)))
    return float(np.sum(value))


def fit_counts(counts: Sequence[int], exposures: Sequence[float] | None = None) -> CountReport:
    n, e = _check(counts, exposures)
    m = float(n.sum() / e.sum())
    pois_ll = float(np.sum(stats.poisson.logpmf(n, m * e)))
    pois = CountFit(family="poisson", names=("rate",), theta=np.array([m]),
                    covariance=np.array([[m / e.sum()]]), log_likelihood=pois_ll, n=n.size)
    d = float(np.sum((n - m * e) ** 2 / (m * e)))
    df = n.size - 1
    notes: list[str] = []
    nb = _fit_nb(n, e, m, notes)
    return CountReport(poisson=pois, negative_binomial=nb, dispersion_statistic=d,
                       dispersion_df=df, dispersion_p_value=float(stats.chi2.sf(d, df)),
                       exposure=float(e[-1]), notes=notes)


def _fit_nb(n: Floats, e: Floats, m: float, notes: list[str]) -> CountFit | None:
    mean_rate = n / e
    var = float(np.var(mean_rate, ddof=1)) if n.size > 1 else 0.0
    excess = var - m / float(np.mean(e))
    if excess <= 0:
        notes.append("the counts are not over-dispersed (sample variance <= mean): the "
                     "negative binomial reduces to the Poisson and is not fitted")
        return None
    r0 = m**2 / excess

    def nll(z: Floats) -> float:
        if not np.all(np.isfinite(z)) or np.any(np.abs(z) > 700):
            return math.inf
        with np.errstate(all="ignore"):
            value = -_nb_loglik(n, e, math.exp(z[0]), math.exp(z[1]))
        return value if math.isfinite(value) else math.inf

    z, f, _ = mle.minimise(nll, np.log([m, r0]))
    theta = np.exp(z)
    cov, _, cov_notes = mle.covariance(nll, z, theta)
    notes.extend(cov_notes)
    if theta[1] > 1e8:
        notes.append("the negative binomial size ran off to infinity (no over-dispersion "
                     "the likelihood can see): use the Poisson")
        return None
    return CountFit(family="negative_binomial", names=("rate", "size"), theta=theta,
                    covariance=cov, log_likelihood=-f, n=n.size)


def count_law(fit: CountFit, exposure: float) -> dict[str, float]:
    """Mean and variance-to-mean ratio of one period with the given exposure."""
    mean = float(fit.theta[0]) * exposure
    if fit.family == "poisson":
        return {"mean": mean}
    return {"mean": mean, "dispersion": 1.0 + mean / float(fit.theta[1])}
