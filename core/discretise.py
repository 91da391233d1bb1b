"""Laws on a lattice {0, h, 2h, ..., K h} with one absorbing cell for "beyond K h", and their sums.

Rounding every claim up to the next lattice point gives a law that is stochastically larger than
the claim, rounding every claim down one that is smaller; since aggregate losses are sums of
non-negative claims, the orderings carry over to every sum and so give rigorous bounds for
P(S > x). Rounding to the nearest point is the best-estimate discretisation (its error is of
order h^2, which the caller extrapolates away).

Claims are >= 0, so once a partial sum passes K h it never comes back: all mass beyond the top
can sit in one absorbing cell without changing any probability P(S > y), y <= K h. That keeps
memory bounded and means the far tail is tracked as a mass of its own, never as 1 - cdf.

Sums of independent lattice laws are direct convolutions. Every term is non-negative, so each
mass keeps its relative accuracy however small it is (an FFT's round-off is a fixed fraction of
the total mass and would swamp a tail of 1e-20). The O(L^2) work is cast as blocked matrix
products so that BLAS does it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from numpy.typing import NDArray

from core.errors import MethodError, ParameterError
from core.severities import Capped, Severity

__all__ = [
    "ROUNDINGS",
    "TINY",
    "CellSplit",
    "Grid",
    "Lattice",
    "convolution_power",
    "convolve",
    "convolve_window",
    "discretise",
    "flush",
    "point_mass",
    "require_nonnegative",
    "split_cells",
]

_Floats = NDArray[np.float64]

Rounding = Literal["down", "up", "nearest"]
ROUNDINGS: tuple[Rounding, ...] = ("down", "up", "nearest")

# Masses below TINY are dropped (or, for the upper bound, moved to the absorbing cell). A product
# of two masses >= TINY is a normal float, and subnormal products slow BLAS down some 60 times.
TINY = 1e-150

_BLOCK = 256  # columns of the blocked convolution: long enough for BLAS to run at full speed
_SMALL = 1 << 18  # below this many multiply-adds numpy.convolve is quicker than the blocks

# Where in a cell the rounding puts its edge: a claim in (e_{k-1}, e_k] goes to lattice point k.
_EDGE_OFFSET: dict[str, float] = {"up": 0.0, "down": 1.0, "nearest": 0.5}


@dataclass(frozen=True, kw_only=True)
class Grid:
    """The lattice {0, span, ..., cells * span}; index cells + 1 stands for everything beyond."""

    span: float
    cells: int

    def __post_init__(self) -> None:
        if not (math.isfinite(self.span) and self.span > 0):
            raise ParameterError("span", f"must be a finite number > 0, got {self.span!r}")
        if self.cells < 1:
            raise ParameterError("cells", f"must be >= 1, got {self.cells!r}")

    @classmethod
    def with_top(cls, *, top: float, cells: int) -> Grid:
        """The grid whose last lattice point is exactly `top`."""
        if not (math.isfinite(top) and top > 0):
            raise ParameterError("top", f"must be a finite number > 0, got {top!r}")
        return cls(span=top / cells, cells=cells)

    @property
    def top(self) -> float:
        return self.span * self.cells

    @property
    def points(self) -> NDArray[np.float64]:
        return np.arange(self.cells + 1, dtype=np.float64) * self.span


@dataclass(frozen=True, kw_only=True)
class Lattice:
    """A law on the grid: pmf[k] = P(Y = k h) for k <= cells, and beyond = P(Y > cells h).

    `rounding` says which way it was built ("up" laws are upper bounds, "down" lower bounds); it
    fixes where negligible masses go and stops laws of different kinds being combined.
    """

    pmf: NDArray[np.float64]
    beyond: float
    rounding: Rounding

    @property
    def cells(self) -> int:
        return self.pmf.size - 1

    def exceedance(self, k: int) -> float:
        """P(Y > k h), summed from the top (small masses first) so far tails keep their digits."""
        if not 0 <= k <= self.cells:
            raise ParameterError("k", f"must be in [0, {self.cells}], got {k!r}")
        return math.fsum(self.pmf[k + 1 :]) + self.beyond

    def survival(self) -> NDArray[np.float64]:
        """s[k] = P(Y > k h) for every k, as reverse cumulative sums from the top."""
        tail = np.cumsum(self.pmf[:0:-1])[::-1]
        out = np.empty_like(self.pmf)
        out[:-1] = tail
        out[-1] = 0.0
        return out + self.beyond


def require_nonnegative(severity: Severity, name: str = "severity") -> None:
    """The recursion needs claims >= 0; a law reaching below 0 (e.g. a normal) cannot be used."""
    if severity.support_min < 0:
        raise MethodError(
            "method",
            f"the recursion needs claims >= 0, but the {name} ({severity.family}) has support "
            f"down to {severity.support_min!r}; use a Monte Carlo method, or a retention at or "
            "above 0, which makes every paid claim non-negative",
        )


def _interval_masses(severity: Severity, edges: NDArray[np.float64]) -> NDArray[np.float64]:
    """P(edges[i] < X <= edges[i + 1]) for increasing edges, without cancellation.

    Below the median a difference of cdf values is accurate, above it a difference of sf values
    (each a difference of two numbers below 1/2, and the far-tail sf comes from the law's
    log-space formula, so 1e-200 keeps its digits); the one interval across the median is
    1 - cdf(left) - sf(right). Each edge is evaluated once, by cdf or by sf.
    """
    median = float(severity.isf(0.5))
    low = edges <= median
    cdf = np.zeros(edges.size)
    sf = np.zeros(edges.size)
    cdf[low] = severity.cdf(edges[low])
    sf[~low] = severity.sf(edges[~low])
    left_low, right_low = low[:-1], low[1:]
    masses = np.where(
        right_low,
        cdf[1:] - cdf[:-1],
        np.where(left_low, 1.0 - cdf[:-1] - sf[1:], sf[:-1] - sf[1:]),
    )
    return np.maximum(masses, 0.0)


def discretise(severity: Severity, grid: Grid, rounding: Rounding) -> Lattice:
    """The claim law rounded onto `grid` ("up", "down" or "nearest"), with the mass beyond."""
    require_nonnegative(severity)
    if rounding not in _EDGE_OFFSET:
        raise ParameterError("rounding", f"must be one of {ROUNDINGS}, got {rounding!r}")
    k = np.arange(grid.cells + 1, dtype=np.float64)
    edges = (k + _EDGE_OFFSET[rounding]) * grid.span
    if rounding == "up":
        edges[-1] = grid.top  # the threshold itself, exactly, so no claim at it is misplaced
    if rounding == "nearest" and isinstance(severity, Capped) and not isinstance(
        severity.base, Capped
    ):
        return flush(_nearest_capped(severity, grid, edges))
    # A claim in (e_{k-1}, e_k] goes to point k; the first cell also takes any mass at 0.
    masses = np.empty(grid.cells + 1)
    masses[0] = float(severity.cdf(edges[0]))
    masses[1:] = _interval_masses(severity, edges)
    beyond = float(severity.sf(edges[-1]))
    return flush(Lattice(pmf=masses, beyond=beyond, rounding=rounding))


def _nearest_capped(severity: Capped, grid: Grid, edges: NDArray[np.float64]) -> Lattice:
    """Best-estimate lattice of min(X, cap): X's continuous part rounded to the nearest point,
    and the atom at the cap shared between its two neighbouring points in proportion to
    closeness (which keeps its mean). Rounding the atom whole would give an error of order h
    that depends on where the cap falls in its cell, and spans h, 2h, 4h would not extrapolate.
    """
    base, cap = severity.base, severity.cap
    clipped = np.minimum(edges, cap)
    masses = np.empty(grid.cells + 1)
    masses[0] = float(base.cdf(clipped[0]))
    masses[1:] = _interval_masses(base, clipped)
    beyond = float(_interval_masses(base, np.array([clipped[-1], cap]))[0])
    position = cap / grid.span
    left = math.floor(position)
    for point, share in ((left, 1.0 - (position - left)), (left + 1, position - left)):
        mass = share * severity.atom
        if point <= grid.cells:
            masses[point] += mass
        else:
            beyond += mass
    return Lattice(pmf=masses, beyond=beyond, rounding="nearest")


def flush(lattice: Lattice) -> Lattice:
    """Zero masses below TINY; an upper-bound law moves them beyond the top (still an upper
    bound), the others drop them (a lower bound stays one; for the estimate it is negligible)."""
    pmf = lattice.pmf
    small = (pmf < TINY) & (pmf > 0.0)
    if not small.any():
        return lattice
    moved = math.fsum(pmf[small]) if lattice.rounding == "up" else 0.0
    pmf = np.where(small, 0.0, pmf)
    return Lattice(pmf=pmf, beyond=lattice.beyond + moved, rounding=lattice.rounding)


# ------------------------------------------------------------------------ direct convolution


def convolve_window(x: _Floats, y: _Floats, start: int, stop: int) -> _Floats:
    """c[t] = sum_i x[i] y[t - i] for start <= t < stop, by direct summation.

    x is cut into blocks of _BLOCK; block q's contribution to c[t + q B] is row t of
    W @ R[:, q], where W[t, s] = y[t + s - B + 1] is a sliding window (Hankel) view of y and
    R[:, q] is block q reversed. Rows are taken in chunks, and each chunk multiplies only the
    blocks that reach the output window, so the work is (stop - start) * len(x) multiply-adds.
    """
    nx, ny = x.size, y.size
    stop = min(stop, nx + ny - 1)
    out = np.zeros(max(stop - start, 0))
    if stop <= start or nx == 0 or ny == 0:
        return out
    if nx * (stop - start) <= _SMALL or nx < 2 * _BLOCK or ny < 2 * _BLOCK:
        lo = max(0, start - nx + 1)
        full = np.convolve(x, y[lo:stop])
        return np.asarray(full[start - lo : stop - lo], dtype=np.float64)
    b = _BLOCK
    m = -(-nx // b)
    blocks = np.zeros(m * b)
    blocks[:nx] = x
    rev = np.ascontiguousarray(blocks.reshape(m, b)[:, ::-1].T)  # (B, m)
    row_lo, row_hi = max(0, start - (m - 1) * b), min(stop, ny + b - 1)
    padded = np.zeros(max(row_hi, ny) + 2 * b)
    padded[b - 1 : b - 1 + ny] = y
    window = sliding_window_view(padded, b)
    chunk = int(np.clip((stop - start) // 4, b, 4096))
    for r0 in range(row_lo, row_hi, chunk):
        r1 = min(r0 + chunk, row_hi)
        q_lo = max(0, -(-(start - r1 + 1) // b))
        q_hi = min(m - 1, (stop - 1 - r0) // b)
        if q_lo > q_hi:
            continue
        prod = np.ascontiguousarray(window[r0:r1]) @ rev[:, q_lo : q_hi + 1]
        for q in range(q_lo, q_hi + 1):
            t_lo, t_hi = max(r0, start - q * b), min(r1, stop - q * b)
            if t_hi > t_lo:
                out[t_lo + q * b - start : t_hi + q * b - start] += prod[
                    t_lo - r0 : t_hi - r0, q - q_lo
                ]
    return out


def _check_same(a: Lattice, b: Lattice) -> None:
    # a Lattice does not carry its span: callers build both laws on one Grid
    if a.cells != b.cells or a.rounding != b.rounding:
        raise ParameterError(
            "lattice", "laws must share the grid and the rounding to be convolved"
        )


def convolve(a: Lattice, b: Lattice) -> Lattice:
    """The law of the sum of independent Y_a + Y_b on the same grid, mass beyond the top kept.

    P(sum > K) = P(Y_a > K) + sum_{i <= K} P(Y_a = i) P(Y_b > K - i): claims are >= 0, so a
    part already beyond the top keeps the sum there; all terms are positive. (Written for
    measures of any total mass, as the count series adds partial sums.)
    """
    _check_same(a, b)
    k = a.cells
    pmf = convolve_window(a.pmf, b.pmf, 0, k + 1)
    b_mass = float(np.sum(b.pmf)) + b.beyond
    beyond = a.beyond * b_mass + float(np.dot(a.pmf, b.survival()[::-1]))
    return flush(Lattice(pmf=pmf, beyond=min(beyond, 1.0), rounding=a.rounding))


def point_mass(like: Lattice, *, at_zero: float = 1.0) -> Lattice:
    pmf = np.zeros(like.cells + 1)
    pmf[0] = at_zero
    return Lattice(pmf=pmf, beyond=0.0, rounding=like.rounding)


def convolution_power(base: Lattice, n: int) -> Lattice:
    """The law of the sum of n independent copies of `base`, by repeated squaring."""
    if n < 0:
        raise ParameterError("n", f"must be >= 0, got {n!r}")
    result: Lattice | None = None
    power = base
    while n:
        if n & 1:
            result = power if result is None else convolve(result, power)
        n >>= 1
        if n:
            power = convolve(power, power)
    return point_mass(base) if result is None else result


# ------------------------------------------------------------------------ within-cell refinement


@dataclass(frozen=True, kw_only=True)
class CellSplit:
    """A claim written as lattice part + residual: X = k h + R with R in (0, h] for X in cell k.

    Given its cell, R has the cdf G_k(r) = P(X <= k h + r | k h < X <= (k + 1) h). Over the
    "good" cells every G_k lies between two cdfs G_lo >= G_k >= G_hi, so writing each claim
    with one uniform U as k h + G_k^-1(U) couples it with R_hi = G_hi^-1(U) and
    R_lo = G_lo^-1(U), which do not depend on the cell (a coupling for the usual stochastic
    order):

        upper:  X <= k h + (h if the cell is bad) + R_hi
        lower:  X >= k h - (h if the cell is bad) + R_lo,   0 <= R_lo, R_hi <= h.

    Summed over n claims the residuals form an independent n-fold sum, and the two bounds
    differ by about n h (spread + 2 P(bad)) instead of n h for plain rounding; the spread is
    of order h for a smooth law, so the gap is of second order. Steep cells (the rise of a
    lognormal near 0, a cell holding an atom) would widen the spread for every claim, so they
    are marked bad: split_cells picks the cut that minimises spread + 2 P(bad).

    The residual laws live on the sub-grid j h / sub: residual_up rounds up (st-larger than
    every good G_k), residual_low rounds down (st-smaller). The mass at 0 and above the top are
    kept apart (`at_zero`, `beyond`).
    """

    grid: Grid
    sub: int
    masses: NDArray[np.float64]  # P(k h < X <= (k + 1) h), k = 0 .. cells - 1
    good: NDArray[np.bool_]
    at_zero: float
    beyond: float  # P(X > top)
    residual_up: NDArray[np.float64]  # P(R_hi = j h / sub), j = 0 .. sub
    residual_low: NDArray[np.float64]  # P(R_lo = j h / sub), j = 0 .. sub
    spread: float  # (E R_hi - E R_lo) / h

    @property
    def gap(self) -> float:
        """Expected gap between the upper and lower value of one claim, in units of h: the
        residual spread, 2 for a bad cell (k + 1 against k - 1) and 1 for a claim of 0
        (R_hi against R_lo - h)."""
        return self.spread + 2.0 * math.fsum(self.masses[~self.good]) + self.at_zero

    @property
    def plain_gap(self) -> float:
        """The same for plain rounding up and down: 1 for every claim above 0."""
        return 1.0 - self.at_zero

    def thinned(self, q: float) -> CellSplit:
        """The claim paid with probability q, else 0 (one trial of a binomial count)."""
        return replace(
            self,
            masses=q * self.masses,
            at_zero=(1.0 - q) + q * self.at_zero,
            beyond=q * self.beyond,
        )

    def upper_lattice(self) -> Lattice:
        """Lattice part for the upper bound, on the grid itself: good cell k -> k, bad -> k + 1."""
        cells = self.grid.cells
        index = np.arange(cells) + np.where(self.good, 0, 1)
        pmf = np.bincount(index, weights=self.masses, minlength=cells + 1).astype(np.float64)
        pmf[0] += self.at_zero
        return flush(Lattice(pmf=pmf, beyond=self.beyond, rounding="up"))

    def lower_lattice(self, claims: int) -> Lattice:
        """Lattice part for the lower bound, shifted up one cell so that a bad cell's k h - h is
        not negative: good k -> k + 1, bad k -> k, a claim of 0 -> 0. The grid carries `claims`
        extra cells for the shift of the sum (threshold index cells + claims); a claim above
        the top is beyond (it makes S exceed the threshold on its own)."""
        cells = self.grid.cells
        index = np.arange(cells) + np.where(self.good, 1, 0)
        pmf = np.bincount(index, weights=self.masses, minlength=cells + claims + 1).astype(
            np.float64
        )
        pmf[0] += self.at_zero
        return flush(Lattice(pmf=pmf, beyond=self.beyond, rounding="down"))


# candidate cut-offs for "good": largest |G_k(r) - r/h| over the sub-grid
_STEEPNESS = (math.inf, *(2.0 ** -i for i in range(1, 17)))
_CHUNK = 1 << 20  # sub-cells evaluated at once


def split_cells(severity: Severity, grid: Grid, sub: int) -> CellSplit:
    """The claim law as lattice part and within-cell residual, residual bounds on `sub` points."""
    require_nonnegative(severity)
    if sub < 1:
        raise ParameterError("sub", f"must be >= 1, got {sub!r}")
    cells, h = grid.cells, grid.span
    uniform = np.arange(1, sub + 1) / sub
    hi = np.ones((len(_STEEPNESS), sub))
    lo = np.zeros((len(_STEEPNESS), sub))
    lo[:, -1] = 1.0  # every G_k reaches 1 at r = h
    bad_mass = np.zeros(len(_STEEPNESS))
    masses = np.zeros(cells)
    steepness = np.full(cells, math.inf)
    rows = max(1, _CHUNK // sub)
    for k0 in range(0, cells, rows):
        k1 = min(cells, k0 + rows)
        edges = (np.arange(k0 * sub, k1 * sub + 1) / sub) * h
        if k1 == cells:
            edges[-1] = grid.top
        fine = _interval_masses(severity, edges).reshape(k1 - k0, sub)
        p = fine.sum(axis=1)
        masses[k0:k1] = p
        held = p > 0
        g = np.cumsum(fine[held], axis=1) / p[held, None]
        g[:, -1] = 1.0
        dev = np.max(np.abs(g - uniform), axis=1)
        steepness[k0:k1][held] = dev
        for i, cut in enumerate(_STEEPNESS):
            ok = dev <= cut
            bad_mass[i] += math.fsum(p[held][~ok])
            if ok.any():
                hi[i] = np.minimum(hi[i], g[ok].min(axis=0))
                lo[i] = np.maximum(lo[i], g[ok].max(axis=0))
    # R_hi takes value j h/sub with mass G_hi(j) - G_hi(j - 1); R_lo value j h/sub with mass
    # G_lo(j + 1) - G_lo(j): rounding up and down on the sub-grid keeps both orderings.
    ups = np.diff(hi, axis=1, prepend=0.0)
    lows = np.diff(lo, axis=1, prepend=0.0)
    spread = (ups @ np.arange(1, sub + 1) - lows @ np.arange(sub)) / sub
    costs = spread + 2.0 * bad_mass
    best = int(np.argmin(costs))
    residual_up = np.concatenate([[0.0], np.maximum(ups[best], 0.0)])
    residual_low = np.concatenate([np.maximum(lows[best], 0.0), [0.0]])
    return CellSplit(
        grid=grid,
        sub=sub,
        masses=masses,
        good=steepness <= _STEEPNESS[best],
        at_zero=float(severity.cdf(0.0)),
        beyond=float(severity.sf(grid.top)),
        residual_up=residual_up,
        residual_low=residual_low,
        spread=float(spread[best]),
    )
