"""The integrated-tail (equilibrium) law of a claim size: density sf(x) / mean, x >= 0.

In the classical compound Poisson surplus process the ascending ladder heights have this law,
which is why the Pollaczek-Khinchine formula writes the infinite-horizon ruin probability as the
tail of a geometric sum of integrated-tail variables.

sf_I(x) = E[(X - x)+] / E[X]. Written as (mean - lev(x)) / mean it cancels in the far tail, so
each family gets a form that stays accurate in log space:

- Lomax(alpha, s) -> Lomax(alpha - 1, s); generalized Pareto(xi, s) -> GP(xi/(1-xi), s/(1-xi));
  exponential -> itself; phase-type(alpha, T) -> phase-type(alpha (-T)^-1 / mean, T). These
  return the law itself, so everything (sampling, quantiles, tilts) is that law's closed form.
- lognormal: E[(X - x)+] in closed form, with log_ndtr in log space;
- Weibull(k, s): sf_I(x) = Q(1/k, (x/s)^k) (regularized upper incomplete gamma), so the
  integrated tail is s G^(1/k) with G ~ Gamma(1/k);
- gamma(a, s): sf_I(x) = Q(a + 1, u) - (u / a) Q(a, u), u = x / s, combined in log space;
- any other law: mean - lev(x) where that keeps its digits, else quadrature of sf beyond x.

Sampling uses the size-biased trick where it has a closed form (if Y has density y f(y) / mean
and U is uniform then U Y has the integrated-tail law): lognormal(mu, s) size-biased is
lognormal(mu + s^2, s), gamma(a, s) size-biased is gamma(a + 1, s). Other laws invert sf_I by a
safeguarded Newton iteration on logsf.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np
from numpy.typing import NDArray
from scipy import integrate, special

from core.errors import ParameterError
from core.severities import (
    Exponential,
    Gamma,
    GeneralizedPareto,
    Lognormal,
    Pareto,
    PhaseType,
    Severity,
    Weibull,
)

__all__ = ["IntegratedTail"]

_Floats = NDArray[np.float64]
# Below this share of the mean, mean - lev(x) has lost too many digits: integrate sf instead.
_DIFFERENCE_FLOOR = 1e-6


def _closed_law(base: Severity) -> Severity | None:
    """The integrated-tail law when it is again one of the families (else None)."""
    if isinstance(base, Exponential):
        return Exponential(mean=base.mean)
    if isinstance(base, Pareto):
        return Pareto(alpha=base.alpha - 1.0, scale=base.scale)  # alpha > 1: the mean is finite
    if isinstance(base, GeneralizedPareto):
        xi = base.xi
        return GeneralizedPareto(xi=xi / (1.0 - xi), scale=base.scale / (1.0 - xi))
    if isinstance(base, Weibull | Gamma) and base.shape == 1.0:
        return Exponential(mean=base.scale)
    if isinstance(base, PhaseType):
        # sf_I(x) = alpha (-T)^-1 expm(T x) 1 / mean: the same T, started from alpha (-T)^-1 / mean
        start = np.linalg.solve(-np.asarray(base.T).T, np.asarray(base.alpha))
        return PhaseType(alpha=start / start.sum(), T=base.T)
    return None


@dataclass(frozen=True, kw_only=True)
class IntegratedTail(Severity):
    """The law with density base.sf(x) / base.mean on x >= 0 (needs a finite mean, claims >= 0)."""

    base: Severity
    _law: Severity | None = field(init=False, repr=False, compare=False)
    _log_mean: float = field(init=False, repr=False, compare=False)
    family: ClassVar[str] = "integrated_tail"

    def __post_init__(self) -> None:
        base = self.base
        if not isinstance(base, Severity):
            raise ParameterError("base", f"must be a Severity, got {type(base).__name__}")
        if base.support_min < 0:
            raise ParameterError("base", "claims must be >= 0 for an integrated tail")
        mean = base.mean
        if not (math.isfinite(mean) and mean > 0):
            raise ParameterError("base", f"needs a finite positive mean, got {mean!r}")
        object.__setattr__(self, "_law", _closed_law(base))
        object.__setattr__(self, "_log_mean", math.log(mean))

    # -- description -------------------------------------------------------------------------

    @property
    def support_max(self) -> float:
        return self.base.support_max

    @property
    def tail(self) -> str:
        return self.base.tail

    # The density sf(x) / mean never increases: stepwise tilts draw within their cells by
    # rejection instead of inverting the survival function (core.sampling).
    decreasing_density: ClassVar[bool] = True

    @property
    def cumulant_bound(self) -> float:
        # M_I(theta) = (M(theta) - 1) / (theta mean): finite exactly where M is
        return self.base.cumulant_bound

    # -- formulas ------------------------------------------------------------------------------

    def _logsf(self, x: _Floats) -> _Floats:
        if self._law is not None:
            return self._law._logsf(x)
        base = self.base
        if isinstance(base, Lognormal):
            return _lognormal_logsf(base, x, self._log_mean)
        if isinstance(base, Weibull):
            return Gamma(shape=1.0 / base.shape, scale=1.0)._logsf((x / base.scale) ** base.shape)
        if isinstance(base, Gamma):
            return _gamma_logsf(base, x)
        return self._generic_logsf(x)

    def _logpdf(self, x: _Floats) -> _Floats:
        return self.base._logsf(x) - self._log_mean

    def _isf_log(self, log_q: _Floats) -> _Floats:
        if self._law is not None:
            return self._law._isf_log(log_q)
        base = self.base
        if isinstance(base, Weibull):
            g = Gamma(shape=1.0 / base.shape, scale=1.0)._isf_log(log_q)
            return base.scale * g ** (1.0 / base.shape)
        return self._isf_newton(log_q)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        if self._law is not None:
            return self._law._sample(size, rng)
        base = self.base
        if isinstance(base, Lognormal):
            biased = rng.lognormal(base.mu + base.sigma**2, base.sigma, size)
            return rng.random(size) * biased
        if isinstance(base, Gamma):
            return rng.random(size) * rng.gamma(base.shape + 1.0, base.scale, size)
        if isinstance(base, Weibull):
            k = base.shape
            return base.scale * rng.gamma(1.0 / k, 1.0, size) ** (1.0 / k)
        return super()._sample(size, rng)

    def _moment(self, k: int) -> float:
        # E[I^k] = E[X^(k+1)] / ((k + 1) E[X])
        higher = self.base.moment(k + 1)
        if not math.isfinite(higher):
            return math.inf
        return higher / ((k + 1) * self.base.mean)

    def _lev(self, t: _Floats) -> _Floats:
        # int_0^t sf_I = (E[min(X, t)^2] / 2 + t E[(X - t)+]) / mean
        base, mean = self.base, self.base.mean
        excess = mean - np.asarray(base.lev(t))
        return (0.5 * np.asarray(base.lev2(t)) + t * excess) / mean

    def _cumulant(self, theta: _Floats) -> _Floats:
        if self._law is not None:
            return self._law._cumulant(theta)
        kappa = np.asarray(self.base.cumulant(theta))
        return np.asarray(np.log(np.expm1(kappa) / theta) - self._log_mean)

    def tilted(self, theta: float) -> Severity:
        if self._law is not None:
            return self._law.tilted(theta)
        return super().tilted(theta)

    # -- numerical fallbacks ------------------------------------------------------------------

    def _generic_logsf(self, x: _Floats) -> _Floats:
        mean = self.base.mean
        share = (mean - np.asarray(self.base.lev(x), dtype=float)) / mean
        out = np.log(np.maximum(share, 1e-300))
        far = share < _DIFFERENCE_FLOOR
        for i in np.flatnonzero(far):
            out[i] = self._log_tail_integral(float(x[i])) - self._log_mean
        return out

    def _log_tail_integral(self, x: float) -> float:
        """log int_x^top sf(t) dt, the integrand scaled by sf(x) so that 1e-300 keeps digits."""
        base = self.base
        log_sf_x = float(base.logsf(x))
        if log_sf_x == -math.inf:
            return -math.inf

        def scaled(t: float) -> float:
            return math.exp(float(base.logsf(t)) - log_sf_x)

        top = base.support_max
        # breakpoints where sf has fallen by e, e^4, e^16, ...: quad then sees where the mass is
        marks = [float(base.isf_log(log_sf_x - d)) for d in (1.0, 4.0, 16.0, 64.0)]
        edges = [x, *sorted(m for m in marks if x < m < top), top]
        total = 0.0
        for a, b in itertools.pairwise(edges):
            total += integrate.quad(scaled, a, b, limit=200, epsabs=0.0, epsrel=1e-11)[0]
        return math.log(total) + log_sf_x

    def _isf_newton(self, log_q: _Floats) -> _Floats:
        """x with logsf(x) = log_q: Newton steps (d logsf / dx = -f_I / sf_I) kept inside a
        bisection bracket, so every step either converges fast or halves the bracket. Only
        the points not yet converged are carried to the next step."""
        top = self.support_max
        lo = np.zeros(log_q.shape)
        hi = np.full(log_q.shape, min(max(self.base.mean, 1e-300), 0.5 * top))
        todo = np.arange(log_q.size)
        for _ in range(2000):  # bracket by doubling
            short = (self._logsf(hi[todo]) > log_q[todo]) & (hi[todo] < top)
            todo = todo[short]
            if not todo.size:
                break
            lo[todo] = hi[todo]
            hi[todo] = np.minimum(hi[todo] * 2.0, top)
        x = 0.5 * (lo + hi)
        todo = np.arange(log_q.size)
        for _ in range(200):
            xs, a, b = x[todo], lo[todo], hi[todo]
            log_sf = self._logsf(xs)
            gap = log_sf - log_q[todo]
            a, b = np.where(gap > 0, xs, a), np.where(gap > 0, b, xs)
            with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
                hazard = np.exp(self.base._logsf(xs) - self._log_mean - log_sf)
                step = xs + gap / hazard
            inside = np.isfinite(step) & (step > a) & (step < b)
            new = np.where(inside, step, 0.5 * (a + b))
            x[todo], lo[todo], hi[todo] = new, a, b
            moving = np.abs(new - xs) > 1e-15 * np.maximum(xs, 1e-300)
            todo = todo[moving]
            if not todo.size:
                break
        return x


def _lognormal_logsf(base: Lognormal, x: _Floats, log_mean: float) -> _Floats:
    # E[(X - x)+] / mean = Phi(d1) - (x / mean) Phi(d2), d1 = (mu + s^2 - ln x) / s, d2 = d1 - s.
    # The second term is r Phi(d1) with r < 1 and 1 - r ~ s / |d1| far out: log1p keeps digits.
    s = base.sigma
    d1 = (base.mu + s * s - np.log(x)) / s
    log_p1 = special.log_ndtr(d1)
    log_r = np.log(x) - log_mean + special.log_ndtr(d1 - s) - log_p1
    return np.asarray(log_p1 + np.log1p(-np.exp(np.minimum(log_r, 0.0))))


def _gamma_logsf(base: Gamma, x: _Floats) -> _Floats:
    # E[(X - x)+] / mean = Q(a + 1, u) - (u / a) Q(a, u), u = x / scale; the ratio of the two
    # terms stays below 1, so the difference is formed as log Q(a+1, u) + log1p(-ratio).
    # Q(a + 1, u) = Q(a, u) + u^a e^-u / Gamma(a + 1) (DLMF 8.8.6): one incomplete gamma, not two.
    a, u = base.shape, x / base.scale
    lower = Gamma(shape=a, scale=1.0)._logsf(u)
    with np.errstate(divide="ignore"):
        upper = np.logaddexp(lower, a * np.log(u) - u - special.gammaln(a + 1.0))
    log_ratio = np.log(u / a) + lower - upper
    return np.asarray(upper + np.log1p(-np.exp(np.minimum(log_ratio, 0.0))))

