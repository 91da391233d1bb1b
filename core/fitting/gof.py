"""Goodness-of-fit statistics (Kolmogorov-Smirnov, Cramer-von Mises, Anderson-Darling) of a
fitted severity, with p-values from a parametric bootstrap that refits every replicate.

The statistics compare the probability-integral transforms u_i = P(X <= x_i | X > d) with the
uniform law. With censoring the empirical law is the Kaplan-Meier estimate of the u's, and
each statistic is its integral form over [0, T], T the largest u (D'Agostino and Stephens
1986, ch. 4): sup |G - t|, n int (G - t)^2 dt and n int (G - t)^2 / (t (1 - t)) dt. Without
censoring these equal the usual formulas exactly.

Estimating the parameters changes the null law of every statistic, so the p-value comes from
a parametric bootstrap (Stute, Gonzalez Manteiga and Presedo Quindimil 1993): samples of the
same design (threshold, limits resampled with the claims) are drawn from the fit, refitted,
and their statistics counted; p = (1 + #{T* >= T}) / (B + 1). For more claims than
``max_claims`` the replicates have ``max_claims`` claims and the n-scaled statistics
(sqrt(n) D, W^2, A^2) are compared, whose null laws settle quickly in n (Stephens 1974).
Replicate b of family k draws from SeedSequence(seed, spawn_key=(BOOTSTRAP, k, b)).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from core.errors import TailgaugeError
from core.fitting.data import ClaimData, Floats
from core.fitting.results import TestResult
from core.severities import Severity

BOOTSTRAP = 101  # spawn-key purpose of the goodness-of-fit replicates
_EDGE = 1e-12  # u is kept inside (0, 1): a claim exactly at the threshold has u = 0


@dataclass(frozen=True, kw_only=True)
class Statistics:
    ks: float
    cvm: float
    ad: float

    def scaled(self, n: int) -> Floats:
        """Statistics whose null laws settle in n: sqrt(n) D, W^2, A^2."""
        return np.array([math.sqrt(n) * self.ks, self.cvm, self.ad])


def _log_sf_at_threshold(severity: Severity, threshold: float | None) -> float:
    if threshold is None or threshold <= severity.support_min:
        return 0.0
    return float(severity.logsf(threshold))


def transforms(severity: Severity, data: ClaimData) -> Floats:
    """u_i = 1 - S(x_i) / S(d), computed in log space."""
    log_sd = _log_sf_at_threshold(severity, data.threshold)
    with np.errstate(all="ignore"):
        u = -np.expm1(np.asarray(severity.logsf(data.x), dtype=float) - log_sd)
    clipped = np.clip(np.nan_to_num(u, nan=1.0), _EDGE, 1.0 - _EDGE)
    return np.asarray(clipped, dtype=np.float64)


def _kaplan_meier(u: Floats, censored: np.ndarray) -> tuple[Floats, Floats]:
    """Sorted points and the Kaplan-Meier distribution function just after each point."""
    order = np.argsort(u, kind="stable")
    t, c = u[order], censored[order]
    at_risk = np.arange(t.size, 0, -1, dtype=float)
    factor = np.where(c, 1.0, 1.0 - 1.0 / at_risk)
    return t, np.asarray(1.0 - np.cumprod(factor), dtype=np.float64)


def _integrals(a: Floats, b: Floats, g: Floats) -> tuple[Floats, Floats]:
    """int_a^b (g - t)^2 dt and int_a^b (g - t)^2 / (t (1 - t)) dt for constant g."""
    plain = ((b - g) ** 3 - (a - g) ** 3) / 3.0
    with np.errstate(divide="ignore", invalid="ignore"):
        left = np.where(g > 0, g**2 * np.log(b / a), 0.0)
        right = np.where(g < 1, (g - 1) ** 2 * (np.log1p(-a) - np.log1p(-b)), 0.0)
    weighted = (left - 2 * g * (b - a) + (b**2 - a**2) / 2 + right + 2 * (g - 1) * (b - a)
                + ((1 - a) ** 2 - (1 - b) ** 2) / 2)
    return plain, weighted


def statistics(u: Floats, censored: np.ndarray) -> Statistics:
    """KS, CvM and AD statistics of transforms ``u`` (Kaplan-Meier with censoring)."""
    n = u.size
    t, g = _kaplan_meier(u, censored)
    before = np.concatenate([[0.0], g[:-1]])
    ks = float(max(np.max(np.abs(g - t)), np.max(np.abs(before - t))))
    top = 1.0 if not censored[np.argmax(u)] else float(t[-1])
    # Intervals [0, t1), [t1, t2), ..., [tn, top] with G constant on each.
    a = np.concatenate([[0.0], t])
    b = np.concatenate([t, [top]])
    level = np.concatenate([[0.0], g])
    plain, weighted = _integrals(a, b, level)
    return Statistics(ks=ks, cvm=float(n * plain.sum()), ad=float(n * weighted.sum()))


def draw(severity: Severity, data: ClaimData, m: int, rng: np.random.Generator) -> ClaimData:
    """m claims of the same design from ``severity``: above the threshold, each with the limit
    of a claim drawn at random from the data."""
    log_sd = _log_sf_at_threshold(severity, data.threshold)
    log_v = -rng.standard_exponential(m)
    x = np.asarray(severity.isf_log(log_sd + log_v), dtype=float)
    limits = data.limits[rng.integers(data.n, size=m)] if data.any_censored else np.full(
        m, math.inf)
    censored = x >= limits
    x = np.where(censored, limits, x)
    if data.threshold is not None:
        x = np.maximum(x, data.threshold)  # rounding at the threshold
    return ClaimData(x=x, censored=censored, threshold=data.threshold, limits=limits)


def bootstrap_tests(
    severity: Severity, data: ClaimData, refit: Callable[[ClaimData], Severity], *,
    replicates: int, max_claims: int, seed: int, key: int, deadline: float | None = None,
) -> tuple[dict[str, TestResult], list[str]]:
    """The three statistics with their parametric-bootstrap p-values.

    ``deadline`` (a ``time.monotonic()`` value): replicates stop there, and the p-values rest
    on those done; (1 + r) / (n + 1) is a valid p-value for any number n of replicates drawn
    independently of their outcomes (the Monte Carlo test p-value; Davison and Hinkley 1997,
    ch. 4, from memory)."""
    observed = statistics(transforms(severity, data), data.censored)
    m = min(data.n, max_claims)
    target = observed.scaled(data.n)
    exceed = np.zeros(3)
    done = 0
    stopped_at = None
    for b in range(replicates):
        if deadline is not None and time.monotonic() >= deadline:
            stopped_at = b
            break
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(BOOTSTRAP, key, b)))
        sample = draw(severity, data, m, rng)
        try:
            refitted = refit(sample)
        except TailgaugeError:
            continue  # e.g. a replicate left with too few exact claims: not counted
        s = statistics(transforms(refitted, sample), sample.censored).scaled(m)
        exceed += s >= target
        done += 1
    notes = []
    tried = replicates if stopped_at is None else stopped_at
    if stopped_at is not None:
        notes.append(f"bootstrap stopped at the time limit after {stopped_at} of {replicates} "
                     "replicates; the p-values rest on those")
    if done < tried:
        notes.append(f"{tried - done} of {tried} bootstrap replicates could not be "
                     "refitted and were left out of the p-values")
    p = (1.0 + exceed) / (done + 1.0)
    names = ("ks", "cvm", "ad")
    values = (observed.ks, observed.cvm, observed.ad)
    return {k: TestResult(statistic=v, p_value=float(pk), replicates=done)
            for k, v, pk in zip(names, values, p, strict=True)}, notes
