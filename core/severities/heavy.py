"""Heavy-tailed claim laws: Lognormal, Pareto (Lomax), Weibull, GeneralizedPareto."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy import special

from core.severities._numeric import _Floats, _h, _set
from core.severities.base import Severity
from core.severities.light import Exponential
from core.validate import positive as _positive
from core.validate import real as _finite


@dataclass(frozen=True, kw_only=True)
class Lognormal(Severity):
    """log X ~ Normal(mu, sigma)."""

    mu: float
    sigma: float
    family: ClassVar[str] = "lognormal"

    def __post_init__(self) -> None:
        _set(self, "mu", _finite("mu", self.mu))
        _set(self, "sigma", _positive("sigma", self.sigma))

    @property
    def tail(self) -> str:
        return "heavy"

    @property
    def cumulant_bound(self) -> float:
        return 0.0

    def _z(self, x: _Floats) -> _Floats:
        return (np.log(x) - self.mu) / self.sigma

    def _logsf(self, x: _Floats) -> _Floats:
        return np.asarray(special.log_ndtr(-self._z(x)))

    def _logcdf(self, x: _Floats) -> _Floats:
        return np.asarray(special.log_ndtr(self._z(x)))

    def _logpdf(self, x: _Floats) -> _Floats:
        z = self._z(x)
        return -np.log(x) - math.log(self.sigma) - 0.5 * math.log(2 * math.pi) - 0.5 * z * z

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return np.exp(self.mu - self.sigma * special.ndtri_exp(log_q))

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return rng.lognormal(self.mu, self.sigma, size)

    def _log_moment(self, k: float) -> float:
        return k * self.mu + 0.5 * (k * self.sigma) ** 2

    def _moment(self, k: int) -> float:
        log_m = self._log_moment(k)
        return math.exp(log_m) if log_m < 709.0 else math.inf

    @property
    def variance(self) -> float:
        log_m = self._log_moment(2)
        if log_m >= 709.0:
            return math.inf
        return math.exp(log_m) * -math.expm1(-(self.sigma**2))

    def _limited(self, t: _Floats, k: int) -> _Floats:
        # E[X^k; X <= t] = exp(k mu + k^2 sigma^2 / 2) Phi((ln t - mu - k sigma^2) / sigma)
        z = self._z(t) - k * self.sigma
        below = np.exp(self._log_moment(k) + special.log_ndtr(z))
        return np.asarray(below + t**k * np.exp(self._logsf(t)))

    def _lev(self, t: _Floats) -> _Floats:
        return self._limited(t, 1)

    def _tail_mean(self, t: _Floats) -> _Floats:
        # E[X; X > t] = exp(mu + sigma^2 / 2) Phi(sigma - (ln t - mu) / sigma), in log space:
        # no cancellation far in the tail, and one normal tail instead of lev's two.
        return np.asarray(np.exp(self._log_moment(1) + special.log_ndtr(self.sigma - self._z(t))))

    def _lev2(self, t: _Floats) -> _Floats:
        return self._limited(t, 2)


@dataclass(frozen=True, kw_only=True)
class Pareto(Severity):
    """Lomax law: sf(x) = (1 + x / scale)^-alpha for x >= 0."""

    alpha: float
    scale: float
    family: ClassVar[str] = "pareto"

    def __post_init__(self) -> None:
        _set(self, "alpha", _positive("alpha", self.alpha))
        _set(self, "scale", _positive("scale", self.scale))

    @property
    def tail(self) -> str:
        return "heavy"

    @property
    def cumulant_bound(self) -> float:
        return 0.0

    def _logsf(self, x: _Floats) -> _Floats:
        return -self.alpha * np.log1p(x / self.scale)

    def _logpdf(self, x: _Floats) -> _Floats:
        log_norm = math.log(self.alpha) - math.log(self.scale)
        return log_norm - (self.alpha + 1) * np.log1p(x / self.scale)

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return self.scale * np.expm1(-log_q / self.alpha)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return self.scale * rng.pareto(self.alpha, size)  # numpy's pareto is the Lomax law

    def _moment(self, k: int) -> float:
        if k >= self.alpha:
            return math.inf
        log_m = (
            k * math.log(self.scale)
            + math.lgamma(k + 1)
            + math.lgamma(self.alpha - k)
            - math.lgamma(self.alpha)
        )
        return math.exp(log_m)

    @property
    def variance(self) -> float:
        a = self.alpha
        if a <= 2:
            return math.inf
        return self.scale**2 * a / ((a - 1) ** 2 * (a - 2))

    def _lev(self, t: _Floats) -> _Floats:
        # int_0^t sf = scale * int_1^U v^-alpha dv with U = 1 + t / scale
        return self.scale * _h(1.0 + t / self.scale, self.alpha)

    def _tail_mean(self, t: _Floats) -> _Floats:
        # E[X; X > t] = t sf(t) + int_t^inf sf = (t + scale U / (alpha - 1)) U^-alpha, alpha > 1
        if self.alpha <= 1:
            return np.full(t.shape, math.inf)
        u = 1.0 + t / self.scale
        return np.asarray((t + self.scale * u / (self.alpha - 1.0)) * u ** -self.alpha)

    def _lev2(self, t: _Floats) -> _Floats:
        # 2 int_0^t x sf(x) dx = 2 scale^2 int_1^U (v - 1) v^-alpha dv
        u = 1.0 + t / self.scale
        return 2.0 * self.scale**2 * (_h(u, self.alpha - 1.0) - _h(u, self.alpha))


@dataclass(frozen=True, kw_only=True)
class Weibull(Severity):
    """sf(x) = exp(-(x / scale)^shape); heavy when shape < 1."""

    shape: float
    scale: float
    family: ClassVar[str] = "weibull"

    def __post_init__(self) -> None:
        _set(self, "shape", _positive("shape", self.shape))
        _set(self, "scale", _positive("scale", self.scale))

    @property
    def tail(self) -> str:
        return "heavy" if self.shape < 1 else "light"

    @property
    def cumulant_bound(self) -> float:
        if self.shape < 1:
            return 0.0
        return 1.0 / self.scale if self.shape == 1 else math.inf

    def _logsf(self, x: _Floats) -> _Floats:
        return -((x / self.scale) ** self.shape)

    def _logpdf(self, x: _Floats) -> _Floats:
        k, y = self.shape, x / self.scale
        return math.log(k / self.scale) + (k - 1) * np.log(y) - y**k

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return self.scale * (-log_q) ** (1.0 / self.shape)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return self.scale * rng.weibull(self.shape, size)

    def _moment(self, k: int) -> float:
        return math.exp(k * math.log(self.scale) + math.lgamma(1 + k / self.shape))

    def _limited(self, t: _Floats, k: int) -> _Floats:
        a = 1.0 + k / self.shape
        with np.errstate(divide="ignore"):
            log_p = np.log(special.gammainc(a, (t / self.scale) ** self.shape))
        head = np.exp(k * math.log(self.scale) + math.lgamma(a) + log_p)
        return np.asarray(head + t**k * np.exp(self._logsf(t)))

    def _lev(self, t: _Floats) -> _Floats:
        return self._limited(t, 1)

    def _tail_mean(self, t: _Floats) -> _Floats:
        # E[X; X > t] = scale Gamma(1 + 1/shape) Q(1 + 1/shape, (t / scale)^shape)
        a = 1.0 + 1.0 / self.shape
        return np.asarray(self.scale * special.gamma(a)
                          * special.gammaincc(a, (t / self.scale) ** self.shape))

    def _lev2(self, t: _Floats) -> _Floats:
        return self._limited(t, 2)

    def _as_exponential(self) -> Exponential | None:
        return Exponential(mean=self.scale) if self.shape == 1 else None

    def _cumulant(self, theta: _Floats) -> _Floats:
        exp_law = self._as_exponential()
        return exp_law._cumulant(theta) if exp_law else super()._cumulant(theta)

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        exp_law = self._as_exponential()
        if exp_law:
            return exp_law._cumulant_derivatives(theta)
        return super()._cumulant_derivatives(theta)

    def tilted(self, theta: float) -> Severity:
        if self.shape != 1:
            return super().tilted(theta)
        theta = self._check_tilt(theta)
        return Weibull(shape=1.0, scale=self.scale / (1.0 - self.scale * theta))


@dataclass(frozen=True, kw_only=True)
class GeneralizedPareto(Severity):
    """sf(x) = (1 + xi x / scale)^(-1/xi); xi = 0 is exponential, xi < 0 has bounded support."""

    xi: float
    scale: float
    family: ClassVar[str] = "generalized_pareto"

    def __post_init__(self) -> None:
        _set(self, "xi", _finite("xi", self.xi))
        _set(self, "scale", _positive("scale", self.scale))

    @property
    def tail(self) -> str:
        return "heavy" if self.xi > 0 else "light"

    @property
    def support_max(self) -> float:
        return -self.scale / self.xi if self.xi < 0 else math.inf

    @property
    def cumulant_bound(self) -> float:
        if self.xi > 0:
            return 0.0
        return 1.0 / self.scale if self.xi == 0 else math.inf

    def _log1p_term(self, x: _Floats) -> _Floats:
        return np.log1p(self.xi * x / self.scale)

    def _logsf(self, x: _Floats) -> _Floats:
        if self.xi == 0:
            return -x / self.scale
        return -self._log1p_term(x) / self.xi

    def _logpdf(self, x: _Floats) -> _Floats:
        if self.xi == 0:
            return -math.log(self.scale) - x / self.scale
        return -math.log(self.scale) - (1.0 / self.xi + 1.0) * self._log1p_term(x)

    def _isf_log(self, log_q: _Floats) -> _Floats:
        if self.xi == 0:
            return -self.scale * log_q
        return self.scale / self.xi * np.expm1(-self.xi * log_q)

    def _moment(self, k: int) -> float:
        # E[X^k] = scale^k k! / prod_{i=1..k} (1 - i xi), finite iff xi < 1/k
        if self.xi * k >= 1:
            return math.inf
        denominator = math.prod(1 - i * self.xi for i in range(1, k + 1))
        return self.scale**k * math.factorial(k) / denominator

    def _lev(self, t: _Floats) -> _Floats:
        if self.xi == 0:
            return -self.scale * np.expm1(-t / self.scale)
        # int_0^t sf = (scale / xi) int_1^U v^(-1/xi) dv with U = 1 + xi t / scale
        return self.scale / self.xi * _h(1.0 + self.xi * t / self.scale, 1.0 / self.xi)

    def _lev2(self, t: _Floats) -> _Floats:
        if abs(self.xi) < 1e-4:  # the closed form below cancels badly as xi -> 0
            return super()._lev2(t)
        u, a = 1.0 + self.xi * t / self.scale, 1.0 / self.xi
        return 2.0 * (self.scale / self.xi) ** 2 * (_h(u, a - 1.0) - _h(u, a))

    def _cumulant(self, theta: _Floats) -> _Floats:
        if self.xi == 0:
            return Exponential(mean=self.scale)._cumulant(theta)
        return super()._cumulant(theta)

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        if self.xi == 0:
            return Exponential(mean=self.scale)._cumulant_derivatives(theta)
        return super()._cumulant_derivatives(theta)

    def tilted(self, theta: float) -> Severity:
        if self.xi != 0:
            return super().tilted(theta)
        theta = self._check_tilt(theta)
        return GeneralizedPareto(xi=0.0, scale=self.scale / (1.0 - self.scale * theta))
