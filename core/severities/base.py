"""The Severity base class: public methods that parse, broadcast and validate once, the ends
of the support, and the numeric fallbacks (quadrature, bisection) a family may lean on."""

from __future__ import annotations

import abc
import functools
import itertools
import math
from collections.abc import Callable
from typing import Any, ClassVar, overload

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import integrate

from core.errors import ParameterError
from core.severities._numeric import (
    _WINDOW_NATS,
    _Array,
    _as_floats,
    _Fill,
    _fill,
    _finish,
    _Floats,
    _log1m_exp,
)
from core.validate import ByFields
from core.validate import real as _finite


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
        lo, hi = self.support_min, self.support_max
        inside = ((flat >= lo) if closed_below else (flat > lo)) & (flat < hi) & np.isfinite(flat)
        if inside.all():
            # The common case inside the sampler: no fills, no masked copies.
            with np.errstate(divide="ignore", invalid="ignore"):
                values = np.asarray(formula(flat), dtype=np.float64)
            return _finish(values, shape, scalar)
        out = np.full(flat.shape, np.nan)  # NaN in, NaN out
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
    def tail_mean(self, t: float) -> float: ...
    @overload
    def tail_mean(self, t: _Array) -> _Floats: ...
    def tail_mean(self, t: ArrayLike) -> Any:
        """E[X; X > t], the first moment beyond t (the stop loss is tail_mean(t) - t sf(t))."""
        return self._evaluate(t, self._tail_mean, lambda v: np.full(v.shape, self.mean), 0.0)

    def _tail_mean(self, t: _Floats) -> _Floats:
        # mean - lev(t) cancels far in the tail: families with a closed form override this.
        return np.maximum(self.mean - self._lev(t), 0.0) + t * np.exp(self._logsf(t))

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
        return _cached_limited(self, t, k)

    def _compute_limited(self, t: float, k: int) -> float:
        """E[min(X, t)^k] = int x^k f(x) dx over (lo, t) + t^k sf(t), by quad on quantile edges."""
        edges = self._edges(t)
        total = 0.0
        for a, b in itertools.pairwise(edges):
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
        return _cached_moment(self, k)

    def _compute_moment(self, k: int) -> float:
        edges = self._edges(self.support_max)
        total = 0.0
        for a, b in itertools.pairwise(edges):
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
        for lo, hi in itertools.pairwise(edges):
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


# The moments of a layered law (a capped excess, say) are quadratures too, and the samplers,
# the VaR guess and the pilots ask for the portfolio's mean and variance many times over.
@functools.lru_cache(maxsize=1024)
def _cached_moment(law: Severity, k: int) -> float:
    return law._compute_moment(k)


@functools.lru_cache(maxsize=4096)
def _cached_limited(law: Severity, t: float, k: int) -> float:
    return law._compute_limited(t, k)


@functools.lru_cache(maxsize=4096)
def _cached_tilt(law: Severity, theta: float) -> tuple[float, float, float]:
    return law._compute_tilt(theta)


def _check_probability(name: str, values: _Floats) -> None:
    if np.any(values < 0) or np.any(values > 1):
        raise ParameterError(name, "must be in [0, 1]")


class _Plain(ByFields, Severity):
    """Value semantics for the families whose parameter is called `mean` (it clashes with the
    base property, so they cannot be dataclasses): repr, equality and hashing from `_fields`."""
