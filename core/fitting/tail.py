"""Tail diagnostics for the choice of a peaks-over-threshold threshold: mean-excess points,
the generalized Pareto shape with its interval over a range of thresholds, and the Hill
estimate of the tail index.

- Mean excess e(u) = E[X - u | X > u]: linear and rising in u for a generalized Pareto tail
  with 0 < xi < 1 (Davison and Smith 1990); standard error sd / sqrt(k) of the k excesses.
- GPD shape: the maximum-likelihood xi of the excesses over each threshold (censored at the
  limits where there are any), with its Wald interval; stable in u above a good threshold.
- Hill (1975): xi_k = mean of log X_(n-i+1) - log X_(n-k), i = 1..k, with the asymptotic
  standard error xi_k / sqrt(k) (for exact Pareto tails; biased for others).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from core.errors import TailgaugeError
from core.fitting.data import ClaimData, Floats
from core.fitting.severity_fit import fit_severity
from core.intervals import Z95

MIN_EXCESSES = 10
POINTS = 12


@dataclass(frozen=True, kw_only=True)
class TailPoint:
    threshold: float
    exceedances: int
    value: float
    ci_low: float | None
    ci_high: float | None


@dataclass(frozen=True, kw_only=True)
class TailDiagnostics:
    mean_excess: list[TailPoint]
    gpd_shape: list[TailPoint]
    hill: list[TailPoint]
    hill_k: int | None
    hill_xi: float | None
    hill_ci: tuple[float, float] | None
    notes: list[str] = field(default_factory=list)


def _thresholds(x: Floats) -> Floats:
    """Sample quantiles from the median up to the point that leaves MIN_EXCESSES claims."""
    s = np.sort(x)
    top = s.size - MIN_EXCESSES - 1
    if top < 1:
        return np.zeros(0)
    idx = np.unique(np.linspace(min(s.size // 2, top), top, POINTS).astype(int))
    return np.unique(s[idx])


def mean_excess(data: ClaimData) -> list[TailPoint]:
    out = []
    for u in _thresholds(data.x):
        exc = data.x[data.x > u] - u
        if exc.size < MIN_EXCESSES:
            continue
        e, se = float(exc.mean()), float(exc.std(ddof=1)) / math.sqrt(exc.size)
        out.append(TailPoint(threshold=float(u), exceedances=int(exc.size), value=e,
                             ci_low=e - Z95 * se, ci_high=e + Z95 * se))
    return out


def gpd_shapes(data: ClaimData) -> list[TailPoint]:
    out = []
    for u in _thresholds(data.x):
        above = data.x > u
        excess = ClaimData(x=data.x[above] - u, censored=data.censored[above], threshold=None,
                           limits=data.limits[above] - u)
        try:
            fit = fit_severity("generalized_pareto", excess)
        except TailgaugeError:
            continue
        xi = float(fit.theta[0])
        se = None if fit.covariance is None else math.sqrt(float(fit.covariance[0, 0]))
        out.append(TailPoint(threshold=float(u), exceedances=int(above.sum()), value=xi,
                             ci_low=None if se is None else xi - Z95 * se,
                             ci_high=None if se is None else xi + Z95 * se))
    return out


def hill(x: Floats, k: int) -> float:
    """Hill's estimate of xi = 1 / alpha from the k largest of the positive amounts x."""
    s = np.sort(x)
    top = np.log(s[-k:])
    return float(np.mean(top) - math.log(s[-k - 1]))


def hill_points(data: ClaimData) -> tuple[list[TailPoint], int | None]:
    """Hill estimates over a range of k, and the headline k = round(sqrt(n)) (common
    practice, a rule of thumb)."""
    x = data.x[data.x > 0]
    n = x.size
    if n <= MIN_EXCESSES + 1:
        return [], None
    s = np.sort(x)
    ks = np.unique(np.linspace(MIN_EXCESSES, min(n - 1, max(n // 2, MIN_EXCESSES)),
                               POINTS).astype(int))
    out = []
    for k in ks:
        xi = hill(x, int(k))
        se = xi / math.sqrt(k)
        out.append(TailPoint(threshold=float(s[-k - 1]), exceedances=int(k), value=xi,
                             ci_low=xi - Z95 * se, ci_high=xi + Z95 * se))
    return out, int(min(max(round(math.sqrt(n)), MIN_EXCESSES), n - 1))


def tail_diagnostics(data: ClaimData) -> TailDiagnostics:
    notes = []
    if data.any_censored:
        notes.append("mean excess and Hill treat capped claims as if they were exact (both "
                     "are then biased low); the GPD shapes account for the censoring")
    points, k = hill_points(data)
    xi = ci = None
    if k is not None:
        xi = hill(data.x[data.x > 0], k)
        half = Z95 * xi / math.sqrt(k)
        ci = (xi - half, xi + half)
    return TailDiagnostics(mean_excess=mean_excess(data), gpd_shape=gpd_shapes(data),
                           hill=points, hill_k=k, hill_xi=xi, hill_ci=ci, notes=notes)
