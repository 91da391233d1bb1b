"""Correlated lognormal amounts: a dependent portfolio whose lines are one lognormal amount each
(count fixed at 1, no per-claim layer) under a gaussian copula, i.e. log X ~ N(mu, Sigma).

In the independent normals g, log X = mu + A g with A = diag(sigma) L. The most likely point of
{S > x} (the design point: smallest |g| with S(g) >= x) satisfies g ∝ A^T w(g) with w the
amounts' shares of S at g (Lagrange); it is found by iterating that direction with an exact
root along it, from several starts (each amount alone, and the common direction).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import numpy.typing as npt
from scipy import special

from core.counts import Fixed
from core.dependence.copula import Copula
from core.dependence.lineset import exceed_interval
from core.portfolio import Portfolio
from core.severities import Lognormal

FloatArray = npt.NDArray[np.float64]


@dataclass(frozen=True)
class Amounts:
    mu: FloatArray
    sigma: FloatArray
    copula: Copula

    @cached_property
    def loading(self) -> FloatArray:
        """A = diag(sigma) L: log X = mu + A g."""
        return np.asarray(self.sigma[:, None] * self.copula.factor, dtype=float)

    @property
    def dim(self) -> int:
        return int(self.mu.size)

    @cached_property
    def mean(self) -> float:
        return float(np.sum(np.exp(self.mu + 0.5 * self.sigma**2)))

    @cached_property
    def variance(self) -> float:
        # Cov(X_i, X_j) = E X_i E X_j (exp(rho_ij sigma_i sigma_j) - 1), the lognormal moments.
        ex = np.exp(self.mu + 0.5 * self.sigma**2)
        cov = np.outer(ex, ex) * np.expm1(self.copula.correlation * np.outer(self.sigma,
                                                                              self.sigma))
        return float(cov.sum())

    def radius(self, direction: FloatArray, log_x: float) -> float:
        """Smallest r >= 0 with S(r d) >= x along the unit direction d (inf if none)."""
        c = self.loading @ direction
        if not np.any(c > 0):
            return math.inf
        b = self.mu[None, :]
        _, t2 = exceed_interval(b, c, np.array([log_x]))
        return float(max(t2[0, 0], 0.0))

    def design_point(self, log_x: float) -> FloatArray:
        """The most likely point of {S > x} in the independent normals."""
        a = self.loading
        starts = [a[i] / np.linalg.norm(a[i]) for i in range(self.dim)]
        common = a.T @ np.ones(self.dim)
        starts.append(common / np.linalg.norm(common))
        best, best_r = starts[0], math.inf
        # Each amount alone is a start; with many amounts the few largest scales suffice.
        order = np.argsort(-(self.mu + 3.0 * self.sigma))[:8]
        for d in [starts[i] for i in order] + [starts[-1]]:
            d, r = self._refine(d, log_x)
            if r < best_r:
                best, best_r = d, r
        return np.asarray(best * best_r, dtype=float)

    def local_design_point(self, log_x: float, start: FloatArray) -> FloatArray:
        d, r = self._refine(start, log_x)
        return np.asarray(d * r, dtype=float)

    def _refine(self, d: FloatArray, log_x: float) -> tuple[FloatArray, float]:
        a = self.loading
        r = self.radius(d, log_x)
        for _ in range(200):
            if not math.isfinite(r):
                return d, r
            y = self.mu + r * (a @ d)
            w = special.softmax(y)
            new = a.T @ w
            new = new / np.linalg.norm(new)
            # Damped: the plain iteration can oscillate between two amounts' regions.
            new = 0.5 * (new + d)
            new = new / np.linalg.norm(new)
            r_new = self.radius(new, log_x)
            moved = float(np.linalg.norm(new - d))
            if r_new > r and moved < 1e-12:
                break
            d, r = new, r_new
            if moved < 1e-10:
                break
        return d, r


def lognormal_amounts(portfolio: Portfolio) -> Amounts | None:
    """The amounts view of a portfolio, or None when it is not that case."""
    cop = getattr(portfolio, "dependence", None)
    if cop is None or cop.kind != "gaussian":
        return None
    mu, sigma = [], []
    for line in portfolio.lines:
        sev = line.severity
        count = line.count
        if not (isinstance(count, Fixed) and count.n == 1 and isinstance(sev, Lognormal)
                and line.retention is None and line.limit is None):
            return None
        mu.append(float(sev.mu))
        sigma.append(float(sev.sigma))
    return Amounts(np.array(mu), np.array(sigma), cop)
