"""Per-claim layer laws: Excess (X - r given X > r) and Capped (min(X, c))."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np

from core.errors import ParameterError
from core.severities._numeric import _Floats, _set
from core.severities.base import Severity
from core.validate import real as _finite


def _check_base(base: object) -> Severity:
    if not isinstance(base, Severity):
        raise ParameterError("base", f"must be a Severity, got {type(base).__name__}")
    return base


@dataclass(frozen=True, kw_only=True)
class Excess(Severity):
    """The law of X - retention given X > retention (the excess over a per-claim retention)."""

    base: Severity
    retention: float
    _log_sf_retention: float = field(init=False, repr=False, compare=False)
    family: ClassVar[str] = "excess"

    def __post_init__(self) -> None:
        base = _check_base(self.base)
        retention = _finite("retention", self.retention)
        if retention < base.support_min:
            raise ParameterError("retention", f"must be >= {base.support_min!r}, got {retention!r}")
        log_sf = float(base.logsf(retention))
        if log_sf == -math.inf:
            raise ParameterError("retention", "lies at or beyond the top of the support")
        _set(self, "retention", retention)
        _set(self, "_log_sf_retention", log_sf)

    @property
    def log_sf_retention(self) -> float:
        """log P(X > retention) of the base law."""
        return self._log_sf_retention

    @property
    def support_max(self) -> float:
        return self.base.support_max - self.retention

    @property
    def tail(self) -> str:
        return self.base.tail

    @property
    def cumulant_bound(self) -> float:
        # sf of the excess is proportional to sf(retention + y): same exponential decay
        return self.base.cumulant_bound

    def _logsf(self, x: _Floats) -> _Floats:
        return self.base._logsf(self.retention + x) - self._log_sf_retention

    def _logpdf(self, x: _Floats) -> _Floats:
        return self.base._logpdf(self.retention + x) - self._log_sf_retention

    def _isf_log(self, log_q: _Floats) -> _Floats:
        shifted = self.base._isf_log(log_q + self._log_sf_retention)
        return np.maximum(shifted - self.retention, 0.0)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        # Rejection from the base law when most draws pass the retention: a base sampler is
        # much cheaper than the inverse transform of some laws (the gamma's, for one).
        if self._log_sf_retention < math.log(0.05):
            return super()._sample(size, rng)
        total = int(np.prod(size))
        if total == 0:
            return np.zeros(size)
        kept: list[np.ndarray] = []
        have = 0
        while have < total:
            want = int((total - have) / math.exp(self._log_sf_retention) * 1.1) + 16
            draws = np.asarray(self.base._sample(want, rng), dtype=np.float64)
            over = draws[draws > self.retention] - self.retention
            kept.append(over)
            have += over.size
        return np.concatenate(kept)[:total].reshape(size)

    def _moment(self, k: int) -> float:
        if not math.isfinite(self.base.moment(k)):
            return math.inf
        return self._numeric_moment(k)

    def _lev(self, t: _Floats) -> _Floats:
        # On X > r, min(X - r, t) = min(X, r + t) - r and below r both limited values agree,
        # so E[min(Y, t)] = (lev_X(r + t) - lev_X(r)) / sf_X(r): vectorised where the base
        # law's lev is, instead of a quadrature per point (thousands per block in the
        # conditional stop-loss). The difference loses about log10(1 / sf_X(r)) digits, so a
        # retention far in the tail keeps the quadrature.
        if self._log_sf_retention < _FAR_RETENTION:
            return super()._lev(t)
        r = self.retention
        upper = np.asarray(self.base.lev(r + np.asarray(t, dtype=float)), dtype=float)
        diff = np.maximum(upper - float(self.base.lev(r)), 0.0)
        return np.minimum(diff / math.exp(self._log_sf_retention), t)


# log P(X > r) below which Excess keeps the quadrature for its limited expected value.
_FAR_RETENTION = math.log(1e-3)


@dataclass(frozen=True, kw_only=True)
class Capped(Severity):
    """The law of min(X, cap): the continuous base below cap and an atom of mass sf(cap) at cap."""

    base: Severity
    cap: float
    family: ClassVar[str] = "capped"

    def __post_init__(self) -> None:
        base = _check_base(self.base)
        cap = _finite("cap", self.cap)
        if not cap > base.support_min:
            raise ParameterError("cap", f"must be > {base.support_min!r}, got {cap!r}")
        _set(self, "cap", cap)

    @property
    def support_min(self) -> float:
        return self.base.support_min

    @property
    def support_max(self) -> float:
        return min(self.cap, self.base.support_max)

    @property
    def atom(self) -> float:
        """P(min(X, cap) = cap) = P(X >= cap)."""
        return float(self.base.sf(self.cap))

    @property
    def tail(self) -> str:
        return "light"

    @property
    def cumulant_bound(self) -> float:
        return math.inf

    def _atom(self) -> tuple[float, float] | None:
        log_mass = float(self.base.logsf(self.cap))
        return (self.cap, log_mass) if log_mass > -math.inf else None

    def _logsf(self, x: _Floats) -> _Floats:
        return self.base._logsf(x)

    def _logcdf(self, x: _Floats) -> _Floats:
        return self.base._logcdf(x)

    def _logpdf(self, x: _Floats) -> _Floats:
        return self.base._logpdf(x)

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return np.minimum(self.base._isf_log(log_q), self.support_max)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        return np.minimum(self.base._sample(size, rng), self.cap)

    def _moment(self, k: int) -> float:
        if k == 1:
            return float(self.base.lev(self.cap))
        if k == 2:
            return float(self.base.lev2(self.cap))
        return self._numeric_moment(k)

    def _lev(self, t: _Floats) -> _Floats:
        return np.asarray(self.base.lev(t))

    def _lev2(self, t: _Floats) -> _Floats:
        return np.asarray(self.base.lev2(t))
