"""Claim-count laws: Fixed, Poisson, NegativeBinomial, Binomial.

Each is a small frozen object with a keyword-only, validated constructor. Besides pmf, cdf and
sampling, every law knows its exponentially tilted version, its size-biased law minus one and its
thinned law, each again a law of the list above: the tilted estimator, the conditional estimator
and per-claim retentions use these in closed form.

The negative binomial is parametrised by its mean and its dispersion Var(N) / E(N) > 1; with
r = mean / (dispersion - 1) and beta = dispersion - 1,
P(N = k) = C(k + r - 1, k) (beta / (1 + beta))^k (1 + beta)^-r.
"""

from __future__ import annotations

import abc
import math
from collections.abc import Sequence
from functools import lru_cache
from typing import Any, ClassVar, overload

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from core.errors import ParameterError
from core.validate import ByFields
from core.validate import integer as _integer
from core.validate import positive as _positive
from core.validate import real as _real

__all__ = ["Binomial", "ClaimCount", "Fixed", "NegativeBinomial", "Poisson"]

_Floats = NDArray[np.float64]
_Array = NDArray[Any] | Sequence[Any]


def _apply(x: ArrayLike, fn: Any) -> Any:
    arr = np.asarray(x, dtype=np.float64)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        out = np.asarray(fn(arr), dtype=np.float64)
    return float(out.reshape(-1)[0]) if arr.ndim == 0 else out


def _check_q(q: float) -> float:
    value = _real("q", q)
    if not 0 < value <= 1:
        raise ParameterError("q", f"must be in (0, 1], got {value!r}")
    return value



@lru_cache(maxsize=256)
def _frozen(name: str, *params: float) -> Any:
    """scipy's frozen law, built once per parameter set: freezing one writes its docstrings
    (0.4 ms), which the pmf(0) of every conditional estimator paid per call."""
    return getattr(stats, name)(*params)

class ClaimCount(ByFields, abc.ABC):
    """The number of claims in a period. Laws compare, hash and print by their parameters."""

    kind: ClassVar[str]

    def __setattr__(self, name: str, value: object) -> None:
        if name in self.__dict__ or not name.startswith("_"):
            raise AttributeError(f"{type(self).__name__} is immutable")
        object.__setattr__(self, name, value)

    @property
    @abc.abstractmethod
    def mean(self) -> float: ...

    @property
    @abc.abstractmethod
    def variance(self) -> float: ...

    @property
    def max_count(self) -> float:
        """Largest possible count (math.inf when unbounded)."""
        return math.inf

    @property
    def mgf_bound(self) -> float:
        """sup of s where log_mgf(s) is finite."""
        return math.inf

    @abc.abstractmethod
    def _scipy(self) -> Any: ...

    @abc.abstractmethod
    def _log_mgf(self, s: _Floats) -> _Floats: ...

    @abc.abstractmethod
    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> NDArray[Any]: ...

    @abc.abstractmethod
    def tilted(self, s: float) -> ClaimCount:
        """The law with P(N = k) proportional to p_k e^{s k}."""

    @abc.abstractmethod
    def tilt_for_mean(self, m: float) -> float:
        """The s at which the tilted law has mean m."""

    @abc.abstractmethod
    def size_biased_minus_one(self) -> ClaimCount:
        """The law of N* - 1 where P(N* = k) = k p_k / E[N]."""

    @abc.abstractmethod
    def thinned(self, q: float) -> ClaimCount:
        """The number of claims kept when each is kept independently with probability q."""

    @overload
    def pmf(self, k: float) -> float: ...
    @overload
    def pmf(self, k: _Array) -> _Floats: ...
    def pmf(self, k: ArrayLike) -> Any:
        return _apply(k, self._scipy().pmf)

    @overload
    def logpmf(self, k: float) -> float: ...
    @overload
    def logpmf(self, k: _Array) -> _Floats: ...
    def logpmf(self, k: ArrayLike) -> Any:
        return _apply(k, self._scipy().logpmf)

    @overload
    def cdf(self, k: float) -> float: ...
    @overload
    def cdf(self, k: _Array) -> _Floats: ...
    def cdf(self, k: ArrayLike) -> Any:
        return _apply(k, self._scipy().cdf)

    @overload
    def quantile(self, q: float) -> float: ...
    @overload
    def quantile(self, q: _Array) -> _Floats: ...
    def quantile(self, q: ArrayLike) -> Any:
        """Smallest k with cdf(k) >= q (for sizing buffers)."""
        arr = np.asarray(q, dtype=np.float64)
        if np.any(arr < 0) or np.any(arr > 1):
            raise ParameterError("q", "must be in [0, 1]")
        return _apply(arr, self._scipy().ppf)

    @overload
    def pgf(self, z: float) -> float: ...
    @overload
    def pgf(self, z: _Array) -> _Floats: ...
    def pgf(self, z: ArrayLike) -> Any:
        """E[z^N] for z in [0, 1] (and beyond where finite)."""
        return _apply(z, lambda v: np.exp(self._log_mgf_checked(np.log(v))))

    @overload
    def log_mgf(self, s: float) -> float: ...
    @overload
    def log_mgf(self, s: _Array) -> _Floats: ...
    def log_mgf(self, s: ArrayLike) -> Any:
        """log E[e^{s N}]; math.inf where it does not exist."""
        return _apply(s, self._log_mgf_checked)

    def _log_mgf_checked(self, s: _Floats) -> _Floats:
        s = np.atleast_1d(s)
        out = np.full(s.shape, math.inf)
        out[np.isnan(s)] = np.nan
        finite = s < self.mgf_bound
        out[finite] = self._log_mgf(s[finite])
        return out

    def sample(self, size: int | tuple[int, ...], rng: Any = None) -> NDArray[np.int64]:
        """Independent draws as int64; `rng` is anything numpy.random.default_rng accepts."""
        return np.asarray(self._sample(size, np.random.default_rng(rng)), dtype=np.int64)

    def _check_tilt(self, s: float) -> float:
        value = _real("s", s)
        if not value < self.mgf_bound:
            raise ParameterError("s", f"must be < {self.mgf_bound!r}, got {value!r}")
        return value

    def _check_target_mean(self, m: float) -> float:
        value = _real("m", m)
        if not 0 < value < self.max_count:
            raise ParameterError("m", f"must be in (0, {self.max_count!r}), got {value!r}")
        return value


class Fixed(ClaimCount):
    """Exactly n claims."""

    kind: ClassVar[str] = "fixed"
    _fields: ClassVar[tuple[str, ...]] = ("n",)

    def __init__(self, *, n: int) -> None:
        self._n = _integer("n", n, 0)

    @property
    def n(self) -> int:
        return self._n

    @property
    def mean(self) -> float:
        return float(self.n)

    @property
    def variance(self) -> float:
        return 0.0

    @property
    def max_count(self) -> float:
        return float(self.n)

    def _scipy(self) -> Any:
        # a binomial with p = 1 is the point mass at n (a law with n = 0 trials is too)
        return _frozen("binom", self.n, 1.0)

    def _log_mgf(self, s: _Floats) -> _Floats:
        return s * self.n

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> NDArray[Any]:
        del rng  # a fixed count draws nothing
        return np.full(size, self.n, dtype=np.int64)

    def tilted(self, s: float) -> ClaimCount:
        self._check_tilt(s)
        return self

    def tilt_for_mean(self, m: float) -> float:
        value = _real("m", m)
        if value != self.n:
            raise ParameterError("m", f"a fixed count has mean {self.n}; cannot tilt to {value!r}")
        return 0.0

    def size_biased_minus_one(self) -> ClaimCount:
        if self.n == 0:
            raise ParameterError("n", "the size-biased law needs E[N] > 0")
        return Fixed(n=self.n - 1)

    def thinned(self, q: float) -> ClaimCount:
        q = _check_q(q)
        if q == 1 or self.n == 0:
            return self
        return Binomial(trials=self.n, probability=q)


class Poisson(ClaimCount):
    """Poisson law with the given mean (> 0)."""

    kind: ClassVar[str] = "poisson"
    _fields: ClassVar[tuple[str, ...]] = ("mean",)

    def __init__(self, *, mean: float) -> None:
        self._mean = _positive("mean", mean)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def variance(self) -> float:
        return self.mean

    def _scipy(self) -> Any:
        return _frozen("poisson", self.mean)

    def _log_mgf(self, s: _Floats) -> _Floats:
        return self.mean * np.expm1(s)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> NDArray[Any]:
        return rng.poisson(self.mean, size)

    def tilted(self, s: float) -> ClaimCount:
        s = self._check_tilt(s)
        return Poisson(mean=self.mean * math.exp(s))

    def tilt_for_mean(self, m: float) -> float:
        return math.log(self._check_target_mean(m) / self.mean)

    def size_biased_minus_one(self) -> ClaimCount:
        return self  # k p_k / lambda = p_{k-1}: the Poisson law is its own size-biased shift

    def thinned(self, q: float) -> ClaimCount:
        return Poisson(mean=self.mean * _check_q(q))


class NegativeBinomial(ClaimCount):
    """Negative binomial law given by its mean and dispersion Var(N) / E(N) > 1."""

    kind: ClassVar[str] = "negative_binomial"
    _fields: ClassVar[tuple[str, ...]] = ("mean", "dispersion")

    def __init__(self, *, mean: float, dispersion: float) -> None:
        self._mean = _positive("mean", mean)
        value = _real("dispersion", dispersion)
        if not value > 1:
            raise ParameterError(
                "dispersion", f"must be > 1 (dispersion 1 is the Poisson law), got {value!r}"
            )
        self._dispersion = value

    @classmethod
    def from_r_beta(cls, *, r: float, beta: float) -> NegativeBinomial:
        """The law with P(N = k) = C(k + r - 1, k) (beta / (1 + beta))^k (1 + beta)^-r."""
        return cls(mean=_positive("r", r) * _positive("beta", beta), dispersion=1.0 + beta)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def dispersion(self) -> float:
        return self._dispersion

    @property
    def beta(self) -> float:
        return self._dispersion - 1.0

    @property
    def r(self) -> float:
        return self._mean / self.beta

    @property
    def variance(self) -> float:
        return self._mean * self._dispersion

    @property
    def mgf_bound(self) -> float:
        return math.log1p(1.0 / self.beta)  # log((1 + beta) / beta)

    def _success(self) -> float:
        return 1.0 / (1.0 + self.beta)  # scipy's and numpy's p

    def _scipy(self) -> Any:
        return _frozen("nbinom", self.r, self._success())

    def _log_mgf(self, s: _Floats) -> _Floats:
        return -self.r * np.log1p(-self.beta * np.expm1(s))

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> NDArray[Any]:
        return rng.negative_binomial(self.r, self._success(), size)

    def tilted(self, s: float) -> ClaimCount:
        # beta' / (1 + beta') = e^s beta / (1 + beta), same r
        s = self._check_tilt(s)
        rho = math.exp(s) * self.beta / (1.0 + self.beta)
        return NegativeBinomial.from_r_beta(r=self.r, beta=rho / (1.0 - rho))

    def tilt_for_mean(self, m: float) -> float:
        new_beta = self._check_target_mean(m) / self.r
        rho_new = new_beta / (1.0 + new_beta)
        rho = self.beta / (1.0 + self.beta)
        return math.log(rho_new / rho)

    def size_biased_minus_one(self) -> ClaimCount:
        return NegativeBinomial.from_r_beta(r=self.r + 1.0, beta=self.beta)

    def thinned(self, q: float) -> ClaimCount:
        return NegativeBinomial.from_r_beta(r=self.r, beta=self.beta * _check_q(q))


class Binomial(ClaimCount):
    """Binomial law: trials >= 1 independent claims, each with the given probability."""

    kind: ClassVar[str] = "binomial"
    _fields: ClassVar[tuple[str, ...]] = ("trials", "probability")

    def __init__(self, *, trials: int, probability: float) -> None:
        self._trials = _integer("trials", trials, 1)
        value = _real("probability", probability)
        if not 0 < value <= 1:
            raise ParameterError("probability", f"must be in (0, 1], got {value!r}")
        self._probability = value

    @property
    def trials(self) -> int:
        return self._trials

    @property
    def probability(self) -> float:
        return self._probability

    @property
    def mean(self) -> float:
        return self._trials * self._probability

    @property
    def variance(self) -> float:
        return self.mean * (1.0 - self._probability)

    @property
    def max_count(self) -> float:
        return float(self._trials)

    def _scipy(self) -> Any:
        return _frozen("binom", self._trials, self._probability)

    def _log_mgf(self, s: _Floats) -> _Floats:
        p = self._probability
        return self._trials * np.log1p(p * np.expm1(s))

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> NDArray[Any]:
        return rng.binomial(self._trials, self._probability, size)

    def tilted(self, s: float) -> ClaimCount:
        s = self._check_tilt(s)
        p = self._probability
        weight = p * math.exp(s)
        return Binomial(trials=self._trials, probability=weight / (1.0 - p + weight))

    def tilt_for_mean(self, m: float) -> float:
        target = self._check_target_mean(m) / self._trials
        p = self._probability
        if p == 1:
            raise ParameterError("m", "a binomial with probability 1 has only mean = trials")
        return math.log(target * (1.0 - p) / (p * (1.0 - target)))

    def size_biased_minus_one(self) -> ClaimCount:
        if self._trials == 1:
            return Fixed(n=0)
        return Binomial(trials=self._trials - 1, probability=self._probability)

    def thinned(self, q: float) -> ClaimCount:
        return Binomial(trials=self._trials, probability=self._probability * _check_q(q))
