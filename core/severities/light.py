"""Light-tailed claim laws: Gamma, Exponential, Normal, PhaseType."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np
from scipy import special

from core.phasetype import PhaseTypeParts, phase_type_parts
from core.severities._numeric import _LOG_HALF, _Floats, _log_gamma_q_cf, _normal_raw_moment, _set
from core.severities.base import Severity, _Plain
from core.validate import positive as _positive
from core.validate import real as _finite


@dataclass(frozen=True, kw_only=True)
class Gamma(Severity):
    """Density x^(shape-1) e^(-x/scale) / (Gamma(shape) scale^shape)."""

    shape: float
    scale: float
    family: ClassVar[str] = "gamma"

    def __post_init__(self) -> None:
        _set(self, "shape", _positive("shape", self.shape))
        _set(self, "scale", _positive("scale", self.scale))

    @property
    def tail(self) -> str:
        return "light"

    @property
    def cumulant_bound(self) -> float:
        return 1.0 / self.scale

    def _logsf_standard(self, u: _Floats) -> _Floats:
        a = self.shape
        # One incomplete gamma per point: Q where it is small, P (through log1p) where Q is
        # near 1, which keeps the digits of 1 - P; the two cost the same.
        q = special.gammaincc(a, u)
        with np.errstate(divide="ignore"):
            out = np.log(np.maximum(q, 1e-320))
        near_one = q > 0.5
        if near_one.any():
            out[near_one] = np.log1p(-special.gammainc(a, u[near_one]))
        far = q < 1e-280  # gammaincc is about to underflow: continued fraction in log space
        if far.any():
            out[far] = _log_gamma_q_cf(a, u[far])
        return np.asarray(out)

    def _logsf(self, x: _Floats) -> _Floats:
        return self._logsf_standard(x / self.scale)

    def _logcdf(self, x: _Floats) -> _Floats:
        u = x / self.scale
        p = special.gammainc(self.shape, u)
        return np.where(p < 0.5, np.log(p), np.log1p(-special.gammaincc(self.shape, u)))

    def _logpdf(self, x: _Floats) -> _Floats:
        a, u = self.shape, x / self.scale
        return (a - 1) * np.log(u) - u - special.gammaln(a) - math.log(self.scale)

    def _isf_log(self, log_q: _Floats) -> _Floats:
        a = self.shape
        out = np.empty_like(log_q)
        lower = log_q >= _LOG_HALF
        out[lower] = special.gammaincinv(a, -np.expm1(log_q[lower]))
        middle = ~lower & (log_q > -700.0)
        out[middle] = special.gammainccinv(a, np.exp(log_q[middle]))
        far = ~lower & ~middle
        if far.any():
            out[far] = self._far_isf_log(log_q[far])
        return out * self.scale

    def _far_isf_log(self, log_q: _Floats) -> _Floats:
        """Newton on log Q(a, u) = log_q; the derivative is minus the hazard rate."""
        a = self.shape
        u = -log_q + max(a - 1.0, 0.0) * np.log(-log_q)
        for _ in range(50):
            log_sf = self._logsf_standard(u)
            hazard = np.exp((a - 1) * np.log(u) - u - special.gammaln(a) - log_sf)
            step = (log_sf - log_q) / hazard
            u = np.maximum(u + step, 0.5 * u)
            if np.all(np.abs(step) <= 1e-15 * u):
                break
        return u

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return rng.gamma(self.shape, self.scale, size)

    def _log_moment(self, k: int) -> float:
        return k * math.log(self.scale) + math.lgamma(self.shape + k) - math.lgamma(self.shape)

    def _moment(self, k: int) -> float:
        return math.exp(self._log_moment(k))

    @property
    def mean(self) -> float:
        return self.shape * self.scale

    @property
    def variance(self) -> float:
        return self.shape * self.scale**2

    def _limited(self, t: _Floats, k: int) -> _Floats:
        # E[X^k; X <= t] = scale^k Gamma(a + k) / Gamma(a) P(a + k, t / scale)
        head = math.exp(self._log_moment(k)) * special.gammainc(self.shape + k, t / self.scale)
        return np.asarray(head + t**k * np.exp(self._logsf(t)))

    def _lev(self, t: _Floats) -> _Floats:
        return self._limited(t, 1)

    def _lev2(self, t: _Floats) -> _Floats:
        return self._limited(t, 2)

    def _cumulant(self, theta: _Floats) -> _Floats:
        return -self.shape * np.log1p(-self.scale * theta)

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        tilted_scale = self.scale / (1.0 - self.scale * theta)
        return self.shape * tilted_scale, self.shape * tilted_scale**2

    def tilted(self, theta: float) -> Severity:
        theta = self._check_tilt(theta)
        return Gamma(shape=self.shape, scale=self.scale / (1.0 - self.scale * theta))


class Exponential(_Plain):
    """sf(x) = exp(-x / mean)."""

    family: ClassVar[str] = "exponential"
    _fields: ClassVar[tuple[str, ...]] = ("mean",)

    def __init__(self, *, mean: float) -> None:
        self._mean = _positive("mean", mean)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def tail(self) -> str:
        return "light"

    @property
    def cumulant_bound(self) -> float:
        return 1.0 / self.mean

    def _logsf(self, x: _Floats) -> _Floats:
        return -x / self.mean

    def _logpdf(self, x: _Floats) -> _Floats:
        return -math.log(self.mean) - x / self.mean

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return -self.mean * log_q

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return rng.exponential(self.mean, size)

    def _moment(self, k: int) -> float:
        return math.factorial(k) * self.mean**k

    @property
    def variance(self) -> float:
        return self.mean**2

    def _lev(self, t: _Floats) -> _Floats:
        return -self.mean * np.expm1(-t / self.mean)

    def _lev2(self, t: _Floats) -> _Floats:
        u = t / self.mean
        return 2.0 * self.mean**2 * special.gammainc(3.0, u) + t * t * np.exp(-u)

    def _cumulant(self, theta: _Floats) -> _Floats:
        return -np.log1p(-self.mean * theta)

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        tilted_mean = self.mean / (1.0 - self.mean * theta)
        return tilted_mean, tilted_mean**2

    def tilted(self, theta: float) -> Severity:
        theta = self._check_tilt(theta)
        return Exponential(mean=self.mean / (1.0 - self.mean * theta))


class Normal(_Plain):
    """Normal(mean, sd) on the whole real line."""

    family: ClassVar[str] = "normal"
    _fields: ClassVar[tuple[str, ...]] = ("mean", "sd")

    def __init__(self, *, mean: float, sd: float) -> None:
        self._mean = _finite("mean", mean)
        self._sd = _positive("sd", sd)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._sd

    @property
    def support_min(self) -> float:
        return -math.inf

    @property
    def tail(self) -> str:
        return "light"

    @property
    def cumulant_bound(self) -> float:
        return math.inf

    def _z(self, x: _Floats) -> _Floats:
        return (x - self.mean) / self.sd

    def _logsf(self, x: _Floats) -> _Floats:
        return np.asarray(special.log_ndtr(-self._z(x)))

    def _logcdf(self, x: _Floats) -> _Floats:
        return np.asarray(special.log_ndtr(self._z(x)))

    def _logpdf(self, x: _Floats) -> _Floats:
        z = self._z(x)
        return -math.log(self.sd) - 0.5 * math.log(2 * math.pi) - 0.5 * z * z

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return self.mean - self.sd * special.ndtri_exp(log_q)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return rng.normal(self.mean, self.sd, size)

    def _moment(self, k: int) -> float:
        return _normal_raw_moment(k, self.mean, self.sd)

    @property
    def variance(self) -> float:
        return self.sd**2

    def _lev(self, t: _Floats) -> _Floats:
        # E[X; X <= t] = mean Phi(z) - sd phi(z); plus t P(X > t)
        z = self._z(t)
        phi = np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
        return self.mean * special.ndtr(z) - self.sd * phi + t * special.ndtr(-z)

    def _lev2(self, t: _Floats) -> _Floats:
        # E[X^2; X <= t] = (mean^2 + sd^2) Phi(z) - sd phi(z) (mean + t); plus t^2 P(X > t)
        z = self._z(t)
        phi = np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
        head = (self.mean**2 + self.sd**2) * special.ndtr(z) - self.sd * phi * (self.mean + t)
        return np.asarray(head + t * t * special.ndtr(-z))

    def _cumulant(self, theta: _Floats) -> _Floats:
        return self.mean * theta + 0.5 * (self.sd * theta) ** 2

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        return self.mean + self.sd**2 * theta, np.full(theta.shape, self.sd**2)

    def tilted(self, theta: float) -> Severity:
        theta = self._check_tilt(theta)
        return Normal(mean=self.mean + self.sd**2 * theta, sd=self.sd)


@dataclass(frozen=True, kw_only=True, eq=False)
class PhaseType(Severity):
    """Absorption time of a Markov jump process: initial vector alpha, sub-generator T."""

    alpha: Any
    T: Any
    _parts: PhaseTypeParts = field(init=False, repr=False)
    family: ClassVar[str] = "phase_type"

    def __post_init__(self) -> None:
        parts = phase_type_parts(self.alpha, self.T)
        _set(self, "_parts", parts)
        _set(self, "alpha", parts.alpha)
        _set(self, "T", parts.T)

    @property
    def exit_rates(self) -> _Floats:
        """t = -T 1."""
        return self._parts.exit

    @property
    def tail(self) -> str:
        return "light"

    @property
    def cumulant_bound(self) -> float:
        return self._parts.decay

    def _logsf(self, x: _Floats) -> _Floats:
        return self._parts.log_sf(x)

    def _logpdf(self, x: _Floats) -> _Floats:
        return self._parts.log_pdf(x)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        count = int(np.prod(size))
        return self._parts.sample(count, rng).reshape(size)

    def _moment(self, k: int) -> float:
        return self._parts.moment(k)

    def _lev(self, t: _Floats) -> _Floats:
        return self._parts.lev(t)

    def _lev2(self, t: _Floats) -> _Floats:
        return self._parts.lev2(t)

    def _cumulant(self, theta: _Floats) -> _Floats:
        return np.array([math.log(self._parts.mgf_terms(float(v))[0]) for v in theta])

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        first, second = [], []
        for v in theta:
            m0, m1, m2 = self._parts.mgf_terms(float(v))
            first.append(m1 / m0)
            second.append(m2 / m0 - (m1 / m0) ** 2)
        return np.array(first), np.array(second)

    def tilted(self, theta: float) -> Severity:
        theta = self._check_tilt(theta)
        alpha, sub = self._parts.tilted(theta)
        return PhaseType(alpha=alpha, T=sub)
