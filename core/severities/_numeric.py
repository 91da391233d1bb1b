"""Numeric helpers of the severity laws: array plumbing and log-space special functions."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special

_Floats = NDArray[np.float64]
_Array = NDArray[Any] | Sequence[Any]
_Fill = float | Callable[[_Floats], _Floats]

_LOG_HALF = math.log(0.5)
_WINDOW_NATS = 60.0  # integrand below exp(-60) of its peak is dropped in tilted integrals


# ---------------------------------------------------------------------------- validation


def _set(obj: object, name: str, value: object) -> None:
    """Store a validated value on a frozen dataclass."""
    object.__setattr__(obj, name, value)


# ---------------------------------------------------------------------------- array plumbing


def _as_floats(x: ArrayLike) -> tuple[_Floats, tuple[int, ...], bool]:
    arr = np.asarray(x, dtype=np.float64)
    return arr.ravel().copy(), arr.shape, arr.ndim == 0


def _finish(values: _Floats, shape: tuple[int, ...], scalar: bool) -> Any:
    if scalar:
        return float(values[0])
    return values.reshape(shape)


def _fill(target: _Floats, mask: NDArray[np.bool_], x: _Floats, value: _Fill) -> None:
    if not mask.any():
        return
    target[mask] = value(x[mask]) if callable(value) else value


def _h(u: _Floats, a: float) -> _Floats:
    """Integral of v^-a over [1, u], written to stay accurate when a is near 1."""
    log_u = np.log(u)
    if a == 1.0:
        return log_u
    return np.asarray(np.expm1((1.0 - a) * log_u) / (1.0 - a))


def _log_gamma_q_cf(a: float, x: _Floats) -> _Floats:
    """log of the regularized upper incomplete gamma Q(a, x) for x > a + 1.

    Continued fraction of Gamma(a, x) (modified Lentz), kept in log space: scipy's gammaincc
    underflows to 0 below about 1e-308, this does not. Elements leave the iteration as they
    converge (far out it takes a handful of steps); x = inf gives -inf.
    """
    x = np.asarray(x, dtype=np.float64)
    out = np.full(x.shape, -math.inf)
    live = np.flatnonzero(np.isfinite(x))
    if live.size == 0:
        return out
    tiny = 1e-300
    xs = x[live]
    b = xs + 1.0 - a
    c = np.full_like(xs, 1.0 / tiny)
    d = 1.0 / b
    h = d.copy()
    active = np.arange(xs.size)
    for i in range(1, 2000):
        an = -i * (i - a)
        b[active] = b[active] + 2.0
        dd = an * d[active] + b[active]
        dd = np.where(np.abs(dd) < tiny, tiny, dd)
        cc = b[active] + an / c[active]
        cc = np.where(np.abs(cc) < tiny, tiny, cc)
        dd = 1.0 / dd
        delta = dd * cc
        d[active], c[active] = dd, cc
        h[active] = h[active] * delta
        active = active[np.abs(delta - 1.0) >= 1e-16]
        if active.size == 0:
            break
    out[live] = -xs + a * np.log(xs) - special.gammaln(a) + np.log(h)
    return out


def _log1m_exp(log_p: _Floats) -> _Floats:
    """log(1 - e^log_p) without cancellation on either side of 1/2 (Maechler's switch)."""
    with np.errstate(divide="ignore"):
        near_one = log_p > -math.log(2.0)
        safe = np.where(near_one, log_p, -1.0)
        return np.where(near_one, np.log(-np.expm1(safe)), np.log1p(-np.exp(log_p)))


def _normal_raw_moment(k: int, mean: float, sd: float) -> float:
    """E[(mean + sd Z)^k] by the binomial expansion; E[Z^j] = (j-1)!! for even j."""
    total = 0.0
    for j in range(0, k + 1, 2):
        double_factorial = math.prod(range(j - 1, 0, -2)) if j else 1
        total += math.comb(k, j) * mean ** (k - j) * sd**j * double_factorial
    return total
