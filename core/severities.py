"""Claim severity laws.

Every law is a small frozen object with a keyword-only constructor that validates its
parameters (`ParameterError` names the bad one). The base class `Severity` parses and
broadcasts arguments once and handles the ends of the support; each family writes only its
private formulas (`_logsf`, `_logpdf`, `_isf_log`, ...), evaluated strictly inside the support.

Far tails go through log space: `logsf` and `isf_log` stay finite and accurate where the
survival probability is 1e-300 or smaller, and sampling inverts in log space where a family has
no exact generator of its own.

Families: Lognormal, Pareto (Lomax), Weibull, Gamma, Exponential, Normal, GeneralizedPareto,
PhaseType, and the per-claim layer laws Excess (X - r given X > r) and Capped (min(X, c)).
"""

from __future__ import annotations

import abc
import functools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar, overload

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import integrate, special

from core.errors import ParameterError
from core.phasetype import PhaseTypeParts, phase_type_parts
from core.validate import positive as _positive
from core.validate import real as _finite

__all__ = [
    "Capped",
    "Excess",
    "Exponential",
    "Gamma",
    "GeneralizedPareto",
    "Lognormal",
    "Normal",
    "Pareto",
    "PhaseType",
    "Severity",
    "Weibull",
]

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


# ---------------------------------------------------------------------------- base class


class Severity(abc.ABC):
    """A claim-size law. Public methods accept scalars or arrays and return float or ndarray."""

    family: ClassVar[str]

    # -- description ----------------------------------------------------------------------

    @property
    def support_min(self) -> float:
        return 0.0

    @property
    def support_max(self) -> float:
        return math.inf

    @property
    @abc.abstractmethod
    def tail(self) -> str:
        """Either "heavy" (no exponential moment) or "light"."""

    @property
    @abc.abstractmethod
    def cumulant_bound(self) -> float:
        """sup of theta where the cumulant is finite."""

    # -- private formulas (x strictly inside the support) -----------------------------------

    @abc.abstractmethod
    def _logsf(self, x: _Floats) -> _Floats: ...

    @abc.abstractmethod
    def _logpdf(self, x: _Floats) -> _Floats: ...

    def _logcdf(self, x: _Floats) -> _Floats:
        return _log1m_exp(self._logsf(x))

    def _isf_log(self, log_q: _Floats) -> _Floats:
        return self._isf_log_numeric(log_q)

    def _sample(self, size: int | tuple[int, ...], rng: np.random.Generator) -> _Floats:
        # -E is the log of a uniform, so this is inverse transform done in log space
        log_u = np.asarray(-rng.standard_exponential(size))
        return np.asarray(self.isf_log(log_u), dtype=np.float64)

    def _moment(self, k: int) -> float:
        return self._numeric_moment(k)

    def _lev(self, t: _Floats) -> _Floats:
        return np.array([self._numeric_limited(float(v), 1) for v in t])

    def _lev2(self, t: _Floats) -> _Floats:
        return np.array([self._numeric_limited(float(v), 2) for v in t])

    def _cumulant(self, theta: _Floats) -> _Floats:
        return np.array([self._numeric_tilt(float(v))[0] for v in theta])

    def _cumulant_derivatives(self, theta: _Floats) -> tuple[_Floats, _Floats]:
        parts = [self._numeric_tilt(float(v)) for v in theta]
        return np.array([p[1] for p in parts]), np.array([p[2] for p in parts])

    def _atom(self) -> tuple[float, float] | None:
        """(location, log mass) of a point mass, if the law has one."""
        return None

    # -- public evaluation --------------------------------------------------------------------

    def _evaluate(
        self,
        x: ArrayLike,
        formula: Callable[[_Floats], _Floats],
        below: _Fill,
        above: _Fill,
        closed_below: bool = False,
    ) -> Any:
        flat, shape, scalar = _as_floats(x)
        out = np.full(flat.shape, np.nan)  # NaN in, NaN out
        lo, hi = self.support_min, self.support_max
        inside = ((flat >= lo) if closed_below else (flat > lo)) & (flat < hi) & np.isfinite(flat)
        _fill(out, (flat <= lo) & ~inside, flat, below)
        _fill(out, flat >= hi, flat, above)
        if inside.any():
            with np.errstate(divide="ignore", invalid="ignore"):
                values = formula(flat[inside])
            out[inside] = values
        return _finish(out, shape, scalar)

    @overload
    def logsf(self, x: float) -> float: ...
    @overload
    def logsf(self, x: _Array) -> _Floats: ...
    def logsf(self, x: ArrayLike) -> Any:
        """log P(X > x), accurate far in the tail."""
        return self._evaluate(x, self._logsf, 0.0, -math.inf)

    @overload
    def sf(self, x: float) -> float: ...
    @overload
    def sf(self, x: _Array) -> _Floats: ...
    def sf(self, x: ArrayLike) -> Any:
        return self._evaluate(x, lambda v: np.exp(self._logsf(v)), 1.0, 0.0)

    @overload
    def logcdf(self, x: float) -> float: ...
    @overload
    def logcdf(self, x: _Array) -> _Floats: ...
    def logcdf(self, x: ArrayLike) -> Any:
        return self._evaluate(x, self._logcdf, -math.inf, 0.0)

    @overload
    def cdf(self, x: float) -> float: ...
    @overload
    def cdf(self, x: _Array) -> _Floats: ...
    def cdf(self, x: ArrayLike) -> Any:
        return self._evaluate(x, lambda v: np.exp(self._logcdf(v)), 0.0, 1.0)

    @overload
    def logpdf(self, x: float) -> float: ...
    @overload
    def logpdf(self, x: _Array) -> _Floats: ...
    def logpdf(self, x: ArrayLike) -> Any:
        """log density of the continuous part (a Capped law's atom is not included)."""

        return self._evaluate(x, self._logpdf_clean, -math.inf, -math.inf, closed_below=True)

    @overload
    def pdf(self, x: float) -> float: ...
    @overload
    def pdf(self, x: _Array) -> _Floats: ...
    def pdf(self, x: ArrayLike) -> Any:
        formula = lambda v: np.exp(self._logpdf_clean(v))  # noqa: E731
        return self._evaluate(x, formula, 0.0, 0.0, closed_below=True)

    def _logpdf_clean(self, x: _Floats) -> _Floats:
        """The density formula with 0 * inf at the support's lower end read as density 0."""
        out = self._logpdf(x)
        return np.where(np.isnan(out), -math.inf, out)

    @overload
    def isf_log(self, log_q: float) -> float: ...
    @overload
    def isf_log(self, log_q: _Array) -> _Floats: ...
    def isf_log(self, log_q: ArrayLike) -> Any:
        """x with logsf(x) = log_q; works for log_q = -700 and beyond."""
        flat, shape, scalar = _as_floats(log_q)
        if np.any(flat > 0):
            raise ParameterError("log_q", "must be <= 0")
        out = np.full(flat.shape, np.nan)
        out[flat == 0] = self.support_min
        out[flat == -math.inf] = self.support_max
        inside = (flat < 0) & np.isfinite(flat)
        if inside.any():
            with np.errstate(divide="ignore", invalid="ignore"):
                out[inside] = self._isf_log(flat[inside])
        out = np.clip(out, self.support_min, self.support_max)
        return _finish(out, shape, scalar)

    @overload
    def isf(self, q: float) -> float: ...
    @overload
    def isf(self, q: _Array) -> _Floats: ...
    def isf(self, q: ArrayLike) -> Any:
        flat, shape, scalar = _as_floats(q)
        _check_probability("q", flat)
        with np.errstate(divide="ignore"):
            return _finish(self.isf_log(np.log(flat)), shape, scalar)

    @overload
    def ppf(self, q: float) -> float: ...
    @overload
    def ppf(self, q: _Array) -> _Floats: ...
    def ppf(self, q: ArrayLike) -> Any:
        flat, shape, scalar = _as_floats(q)
        _check_probability("q", flat)
        with np.errstate(divide="ignore"):
            return _finish(self.isf_log(np.log1p(-flat)), shape, scalar)

    def sample(self, size: int | tuple[int, ...], rng: Any = None) -> _Floats:
        """Independent draws; `rng` is anything numpy.random.default_rng accepts."""
        generator = np.random.default_rng(rng)
        return np.asarray(self._sample(size, generator), dtype=np.float64)

    # -- moments ------------------------------------------------------------------------------

    def moment(self, k: int) -> float:
        """Raw moment E[X^k]; math.inf when it is not finite."""
        if isinstance(k, bool) or not isinstance(k, int | np.integer) or k < 0:
            raise ParameterError("k", f"must be an integer >= 0, got {k!r}")
        if k == 0:
            return 1.0
        return float(self._moment(int(k)))

    @property
    def mean(self) -> float:
        return self.moment(1)

    @property
    def variance(self) -> float:
        second = self.moment(2)
        if not math.isfinite(second):
            return math.inf
        return max(second - self.mean**2, 0.0)

    @overload
    def lev(self, t: float) -> float: ...
    @overload
    def lev(self, t: _Array) -> _Floats: ...
    def lev(self, t: ArrayLike) -> Any:
        """Limited expected value E[min(X, t)]."""
        return self._evaluate(t, self._lev, lambda v: v, lambda v: np.full(v.shape, self.mean))

    @overload
    def lev2(self, t: float) -> float: ...
    @overload
    def lev2(self, t: _Array) -> _Floats: ...
    def lev2(self, t: ArrayLike) -> Any:
        """E[min(X, t)^2]."""
        second = lambda v: np.full(v.shape, self.moment(2))  # noqa: E731
        return self._evaluate(t, self._lev2, lambda v: v * v, second)

    # -- exponential moments ------------------------------------------------------------------

    def _finite_cumulant(self, theta: _Floats) -> NDArray[np.bool_]:
        return (theta < self.cumulant_bound) | (theta == 0)

    @overload
    def cumulant(self, theta: float) -> float: ...
    @overload
    def cumulant(self, theta: _Array) -> _Floats: ...
    def cumulant(self, theta: ArrayLike) -> Any:
        """log E[exp(theta X)]; math.inf where it does not exist."""
        flat, shape, scalar = _as_floats(theta)
        out = np.full(flat.shape, math.inf)
        out[np.isnan(flat)] = np.nan
        out[flat == 0] = 0.0
        work = self._finite_cumulant(flat) & (flat != 0)
        if work.any():
            out[work] = self._cumulant(flat[work])
        return _finish(out, shape, scalar)

    def cumulant_derivatives(self, theta: ArrayLike) -> tuple[Any, Any]:
        """(kappa'(theta), kappa''(theta)): mean and variance of the tilted law (inf outside)."""
        flat, shape, scalar = _as_floats(theta)
        first = np.full(flat.shape, math.inf)
        second = np.full(flat.shape, math.inf)
        zero = flat == 0
        first[zero], second[zero] = self.mean, self.variance
        work = self._finite_cumulant(flat) & ~zero
        if work.any():
            first[work], second[work] = self._cumulant_derivatives(flat[work])
        return _finish(first, shape, scalar), _finish(second, shape, scalar)

    def tilted(self, theta: float) -> Severity:
        """The law e^{theta x} f(x) / M(theta) where it has a closed form."""
        raise NotImplementedError(f"{self.family}: no closed-form tilted law")

    def sample_tilted(self, theta: float, size: int | tuple[int, ...], rng: Any = None) -> _Floats:
        """Draws from the exponentially tilted law (NotImplementedError without a closed form)."""
        return self.tilted(theta).sample(size, rng)

    def _check_tilt(self, theta: float) -> float:
        value = _finite("theta", theta)
        if not value < self.cumulant_bound:
            raise ParameterError("theta", f"must be < {self.cumulant_bound!r}, got {value!r}")
        return value

    # -- numerical fallbacks -------------------------------------------------------------------

    def _isf_log_numeric(self, log_q: _Floats) -> _Floats:
        """Bisection on logsf: bracket by doubling from the mean, then halve 100 times."""
        lo = np.full(log_q.shape, max(self.support_min, 0.0))
        hi = np.full(log_q.shape, max(self.mean, 1e-300) if self.tail == "light" else 1.0)
        for _ in range(2000):
            short = self._logsf(hi) > log_q
            if not short.any():
                break
            lo = np.where(short, hi, lo)
            hi = np.where(short, hi * 2.0, hi)
        for _ in range(100):
            mid = 0.5 * (lo + hi)
            above = self._logsf(mid) > log_q
            lo, hi = np.where(above, mid, lo), np.where(above, hi, mid)
        return 0.5 * (lo + hi)

    def _grid(self) -> _Floats:
        return _cached_grid(self)

    def _build_grid(self) -> _Floats:
        """Quantiles from cdf 1e-30 out to sf e^-1000: breakpoints for quadrature."""
        low = self._isf_log(np.log1p(-np.logspace(-30.0, math.log10(0.5), 25)))
        high = self._isf_log(-np.logspace(math.log10(math.log(2.0)), 3.0, 50))
        grid = np.unique(np.concatenate([low, high]))
        lo, hi = self.support_min, self.support_max
        grid = grid[np.isfinite(grid) & (grid > lo) & (grid < hi)]
        # drop breakpoints that crowd together (quantiles of a bounded law pile up at its top)
        gaps = np.diff(np.concatenate([grid, [hi]])) if math.isfinite(hi) else None
        if gaps is not None:
            grid = grid[gaps > 1e-9 * max(abs(hi), 1e-300)]
        if grid.size == 0 and math.isfinite(lo) and math.isfinite(hi) and hi > lo:
            # Every quantile lies past the top (a limit far below the body of the law, its
            # mass in the atom there): quadrature still needs breakpoints inside the support.
            grid = lo + (hi - lo) * np.linspace(0.0, 1.0, 34)[1:-1]
        if math.isfinite(lo) and grid.size:
            grid = np.concatenate([lo + (grid[0] - lo) * np.logspace(-12.0, -0.5, 12), grid])
        return grid

    def _scalar_logpdf(self, x: float) -> float:
        with np.errstate(divide="ignore", invalid="ignore"):
            return float(self._logpdf(np.array([x]))[0])

    def _edges(self, upper: float) -> list[float]:
        grid = self._grid()
        lo = self.support_min
        inner = grid[grid < upper].tolist()
        start = lo if math.isfinite(lo) else -math.inf
        return [start, *inner, upper]

    def _numeric_limited(self, t: float, k: int) -> float:
        """E[min(X, t)^k] = int x^k f(x) dx over (lo, t) + t^k sf(t), by quad on quantile edges."""
        edges = self._edges(t)
        total = 0.0
        for a, b in zip(edges[:-1], edges[1:], strict=False):
            total += integrate.quad(self._power_density, a, b, args=(k,), limit=200)[0]
        return total + t**k * math.exp(float(self._logsf(np.array([t]))[0]))

    def _power_density(self, v: float, k: int) -> float:
        """x^k f(x), formed in log space so that x^k cannot overflow where f(x) is tiny."""
        if v == 0:
            return 0.0 if k else math.exp(self._scalar_logpdf(v))
        sign = -1.0 if v < 0 and k % 2 else 1.0
        log_value = k * math.log(abs(v)) + self._scalar_logpdf(v)
        return sign * math.exp(log_value) if log_value < 709.0 else sign * math.inf

    def _numeric_moment(self, k: int) -> float:
        edges = self._edges(self.support_max)
        total = 0.0
        for a, b in zip(edges[:-1], edges[1:], strict=False):
            total += integrate.quad(self._power_density, a, b, args=(k,), limit=200)[0]
        atom = self._atom()
        if atom is not None:
            total += atom[0] ** k * math.exp(atom[1])
        return total

    def _numeric_tilt(self, theta: float) -> tuple[float, float, float]:
        return _cached_tilt(self, theta)

    def _compute_tilt(self, theta: float) -> tuple[float, float, float]:
        """(kappa, kappa', kappa'') by quad of e^{theta x} f(x) around its peak (+ the atom).

        The integrand is scaled by its peak value and x is centred on the peak, so the three
        integrals share one scale and kappa'' is not a difference of two large numbers.
        """
        grid = self._grid()
        log_g = theta * grid + self._logpdf(grid)
        log_g = np.where(np.isnan(log_g), -math.inf, log_g)
        if theta > 0 and math.isinf(self.support_max):
            for _ in range(60):  # peak beyond the grid: walk outwards
                if int(np.argmax(log_g)) < grid.size - 1:
                    break
                more = grid[-1] * 2.0 ** np.arange(1, 9)
                grid = np.concatenate([grid, more])
                log_g = np.concatenate([log_g, theta * more + self._logpdf(more)])
        # judge where the mass lies by integrand times cell width, so that an integrable spike
        # of the density at the lower end (gamma or Weibull shape < 1) does not set the window
        cells = np.diff(np.concatenate([[grid[0]], 0.5 * (grid[1:] + grid[:-1]), [grid[-1]]]))
        with np.errstate(divide="ignore"):
            log_mass = log_g + np.log(cells)
        peak = int(np.argmax(log_mass))
        centre, g_star = float(grid[peak]), float(log_g[peak])
        keep = np.nonzero(log_mass >= log_mass[peak] - _WINDOW_NATS)[0]
        first, last = int(keep[0]) - 1, int(keep[-1]) + 1
        a = float(grid[first]) if first >= 0 else self.support_min
        b = float(grid[last]) if last < grid.size else self.support_max
        width = max(float(grid[keep[-1]] - grid[keep[0]]), abs(centre), 1e-300)

        def integrand(v: float) -> _Floats:
            u = (v - centre) / width
            weight = math.exp(theta * v + self._scalar_logpdf(v) - g_star)
            return np.array([weight, u * weight, u * u * weight])

        inner = grid[first + 1 : last].tolist()
        edges = [a, *inner, b]
        sums = np.zeros(3)
        for lo, hi in zip(edges[:-1], edges[1:], strict=False):
            sums += integrate.quad_vec(integrand, lo, hi, epsrel=1e-11, limit=200)[0]
        atom = self._atom()
        if atom is not None:
            log_atom = theta * atom[0] + atom[1]
            shift = max(log_atom, g_star)
            u_atom = (atom[0] - centre) / width
            w = math.exp(log_atom - shift)
            sums = sums * math.exp(g_star - shift) + w * np.array([1.0, u_atom, u_atom**2])
            g_star = shift
        mean_u = sums[1] / sums[0]
        var_u = max(sums[2] / sums[0] - mean_u**2, 0.0)
        return g_star + math.log(sums[0]), centre + width * mean_u, width**2 * var_u


# Laws are immutable and hashable, so the quadrature results can be remembered: root finders
# for the saddlepoint call the cumulant many times at nearby and repeated points.
@functools.lru_cache(maxsize=256)
def _cached_grid(law: Severity) -> _Floats:
    grid = law._build_grid()
    grid.setflags(write=False)
    return grid


@functools.lru_cache(maxsize=4096)
def _cached_tilt(law: Severity, theta: float) -> tuple[float, float, float]:
    return law._compute_tilt(theta)


def _check_probability(name: str, values: _Floats) -> None:
    if np.any(values < 0) or np.any(values > 1):
        raise ParameterError(name, "must be in [0, 1]")


class _Plain(Severity):
    """Value semantics for the families whose parameter is called `mean` (it clashes with the
    base property, so they cannot be dataclasses): repr, equality and hashing from `_fields`."""

    _fields: ClassVar[tuple[str, ...]]

    def _values(self) -> tuple[float, ...]:
        return tuple(getattr(self, name) for name in self._fields)

    def __repr__(self) -> str:
        args = ", ".join(f"{n}={v!r}" for n, v in zip(self._fields, self._values(), strict=True))
        return f"{type(self).__name__}({args})"

    def __eq__(self, other: object) -> bool:
        return (
            isinstance(other, _Plain)
            and type(other) is type(self)
            and self._values() == other._values()
        )

    def __hash__(self) -> int:
        return hash((type(self).__name__, self._values()))


# ---------------------------------------------------------------------------- heavy families


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


# ---------------------------------------------------------------------------- light families


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
        p, q = special.gammainc(a, u), special.gammaincc(a, u)
        with np.errstate(divide="ignore"):
            out = np.where(p < 0.5, np.log1p(-p), np.log(np.maximum(q, 1e-320)))
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


# ---------------------------------------------------------------------------- layer laws


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
