"""Deterministic cross-check: rigorous lower and upper bounds for P(S > x) without sampling.

Each paid claim law is put on a lattice twice (core.discretise): rounded down (a stochastically
smaller claim, so a lower bound for every P(S > x)) and rounded up (an upper bound). Each line's
aggregate follows from its count law: the n-fold convolution by repeated squaring for fixed
counts and for binomial counts (a binomial sum is the trials-fold sum of "a claim with the given
probability, else nothing"); Panjer's recursion of the (a, b, 0) class for Poisson and negative
binomial counts, or, for tails below 1e-6, the count series sum_n P(N = n) X^{*n}. Lines are
combined by convolution. All of it adds non-negative terms only.

For fixed and binomial counts the bounds are tightened by splitting each claim into its cell
and a residual within the cell (core.discretise.CellSplit): the residuals are bounded by one
law for all smooth cells and add up independently, which turns the gap of about n h between
rounding up and down into one of order n h^2.

A threshold is always the top lattice point and the mass beyond it is carried as its own number,
so a tail probability is read off as that mass. The one exception is Panjer's recursion, which
yields P(S = k) for k <= K only: its mass beyond is 1 - sum (round-off ~1e-16), used only while
the tail is above 1e-6, and the bounds are widened by 1e-13 to cover it.

The best estimate rounds claims to the nearest lattice point (error of order h^2) at spans h, 2h
and 4h and extrapolates to h = 0 (Romberg), then is kept within the bounds.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TypeVar

import numpy as np
from numpy.typing import NDArray

from core.compound import COMPLEMENT_MIN, compound
from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.discretise import (
    CellSplit,
    Grid,
    Lattice,
    Rounding,
    convolution_power,
    convolve,
    convolve_window,
    discretise,
    require_nonnegative,
    split_cells,
)
from core.errors import LimitError, ParameterError
from core.portfolio import Line, Portfolio
from core.severities import Severity

__all__ = [
    "DEFAULT_CELLS",
    "AggregateBounds",
    "aggregate",
    "aggregate_bounds",
    "compound",
    "convolution_power",
    "exceedance_bounds",
    "exceedance_points",
    "iid_sum_bounds",
    "refine_cells",
]

_Floats = NDArray[np.float64]
T = TypeVar("T")

DEFAULT_CELLS = 8192
# method=recursion starts at RECURSION_CELLS and doubles towards its precision target.
RECURSION_CELLS = 8192
RECURSION_MAX_CELLS = 131_072


# ------------------------------------------------------------------------ portfolios


def _check_portfolio(portfolio: Portfolio) -> None:
    for i, line in enumerate(portfolio.lines):
        require_nonnegative(line.paid_severity, f"paid severity of line {i}")


def _random_count(line: Line) -> bool:
    return isinstance(line.paid_count, Poisson | NegativeBinomial)


def _product(laws: Sequence[Lattice]) -> Lattice:
    total = laws[0]
    for law in laws[1:]:
        total = convolve(total, law)
    return total


def aggregate(
    portfolio: Portfolio, grid: Grid, rounding: Rounding, *, exact_tail: bool | None = None
) -> Lattice:
    """The law of S on `grid`, with every claim rounded the given way.

    exact_tail: True forces the count series for Poisson and negative binomial lines (mass
    beyond the top exact in relative terms), False forces Panjer's recursion; None (default)
    uses the recursion and redoes those lines with the series when the tail is below 1e-6.
    """
    _check_portfolio(portfolio)
    claims = [discretise(line.paid_severity, grid, rounding) for line in portfolio.lines]
    first = exact_tail is True
    laws = [
        compound(line.paid_count, claim, exact_tail=first)
        for line, claim in zip(portfolio.lines, claims, strict=True)
    ]
    total = _product(laws)
    randoms = [i for i, line in enumerate(portfolio.lines) if _random_count(line)]
    if exact_tail is None and randoms and total.beyond < COMPLEMENT_MIN:
        for i in randoms:
            laws[i] = compound(portfolio.lines[i].paid_count, claims[i], exact_tail=True)
        total = _product(laws)
    return total


# ------------------------------------------------------------------------ within-cell refinement

_SUB_MAX = 512  # sub-points per cell for the residual laws
_SUB_WORK = 1 << 25  # cells * sub: cdf evaluations per line
_SUB_SUM = 1 << 17  # claims * sub: length of the residual sum


def _trials(count: ClaimCount) -> int | None:
    """Number of claims, each paid or not, for a fixed or binomial count; else None."""
    if isinstance(count, Fixed):
        return count.n
    if isinstance(count, Binomial):
        return count.trials
    return None


def _line_split(line: Line, grid: Grid, sub: int) -> CellSplit:
    split = split_cells(line.paid_severity, grid, sub)
    count = line.paid_count
    return split.thinned(count.probability) if isinstance(count, Binomial) else split


def _full_convolution(x: _Floats, y: _Floats) -> _Floats:
    return convolve_window(x, y, 0, x.size + y.size - 1)


def _residual_sum(law: _Floats, n: int) -> _Floats:
    """pmf of the sum of n independent residuals on the sub-grid (full length n * sub + 1)."""
    result = np.ones(1)
    power = law
    while n:
        if n & 1:
            result = _full_convolution(result, power)
        n >>= 1
        if n:
            power = _full_convolution(power, power)
    return result


def _survival(pmf: _Floats, at: NDArray[np.int64]) -> _Floats:
    """P(V > t) for integer t (t beyond the support gives 0), summed from the top."""
    tail = np.concatenate([np.cumsum(pmf[::-1])[::-1][1:], [0.0]])
    return np.where(at < tail.size, tail[np.minimum(at, tail.size - 1)], 0.0)


def _refined_bounds(portfolio: Portfolio, x: float, cells: int) -> tuple[float, float] | None:
    """Bounds for P(S > x) from the within-cell refinement (CellSplit), or None when a line has
    a random count or the refinement would not beat plain rounding.

    upper = P(A_up + V_hi > x), lower = P(A_low + V_lo > x + N h), with A the lattice parts'
    sum (on the grid, the lower one shifted by one cell per claim) and V the independent sum of
    the N residuals; only the N cells below the threshold need V, the rest is A's tail.
    """
    trials = [_trials(line.paid_count) for line in portfolio.lines]
    if any(n is None for n in trials):
        return None
    counts = [int(n or 0) for n in trials]
    claims = sum(counts)
    if claims == 0:
        return 0.0, 0.0
    sub = int(min(_SUB_MAX, max(8, _SUB_WORK // cells), max(8, _SUB_SUM // claims)))
    if claims * sub > 4 * _SUB_SUM:
        return None  # so many claims that the residual sum would cost more than it saves
    grid = Grid.with_top(top=x, cells=cells)
    splits = [_line_split(line, grid, sub) for line in portfolio.lines]
    pairs = list(zip(splits, counts, strict=True))
    if sum(n * s.gap for s, n in pairs) >= sum(n * s.plain_gap for s, n in pairs):
        return None  # e.g. a binomial with few paid claims: plain rounding is tighter
    upper_sum = _product([convolution_power(s.upper_lattice(), n) for s, n in pairs])
    lower_sum = _product([convolution_power(s.lower_lattice(claims), n) for s, n in pairs])
    v_hi, v_lo = np.ones(1), np.ones(1)
    for split, n in pairs:
        v_hi = _full_convolution(v_hi, _residual_sum(split.residual_up, n))
        v_lo = _full_convolution(v_lo, _residual_sum(split.residual_low, n))
    near = np.arange(max(0, cells - claims), cells + 1, dtype=np.int64)
    upper = upper_sum.beyond + float(
        np.dot(upper_sum.pmf[near], _survival(v_hi, (cells - near) * sub))
    )
    top = cells + claims
    near = np.arange(cells, top + 1, dtype=np.int64)
    lower = lower_sum.beyond + float(
        np.dot(lower_sum.pmf[near], _survival(v_lo, (top - near) * sub))
    )
    return lower, min(upper, 1.0)


# ------------------------------------------------------------------------ public results


@dataclass(frozen=True, kw_only=True)
class AggregateBounds:
    """The law of S on one grid, claims rounded down (`lower`) and up (`upper`).

    For every y on the grid P(S_lower > y) <= P(S > y) <= P(S_upper > y); the mass beyond the
    top is `tail_low` / `tail_up`. Between grid points the bounds step outward (exceedance()).
    These are the plain rounding bounds for the whole law; the tighter within-cell refinement
    is built for one threshold at a time (exceedance_bounds).
    """

    grid: Grid
    lower: Lattice
    upper: Lattice

    @property
    def points(self) -> _Floats:
        return self.grid.points

    @property
    def pmf_low(self) -> _Floats:
        return self.lower.pmf

    @property
    def pmf_up(self) -> _Floats:
        return self.upper.pmf

    @property
    def tail_low(self) -> float:
        return self.lower.beyond

    @property
    def tail_up(self) -> float:
        return self.upper.beyond

    def exceedance(self, x: float) -> tuple[float, float]:
        """Rigorous (lower, upper) bounds for P(S > x), 0 <= x <= top."""
        h, cells = self.grid.span, self.grid.cells
        if not 0.0 <= x <= self.grid.top:
            raise ParameterError("x", f"must be in [0, {self.grid.top!r}], got {x!r}")
        # P(S > x) is decreasing in x: read the lower bound at the grid point above x and the
        # upper bound at the grid point below (exactly at a point both are that point).
        ratio = x / h
        near = round(ratio)
        on_point = abs(ratio - near) <= 1e-12 * max(1.0, ratio)
        above = near if on_point else math.ceil(ratio)
        below = near if on_point else math.floor(ratio)
        return self.lower.exceedance(min(above, cells)), self.upper.exceedance(max(below, 0))


def _check_cells(cells: int | None, max_cells: int, multiple: int = 1) -> int:
    value = DEFAULT_CELLS if cells is None else cells
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 8:
        raise ParameterError("cells", f"must be an integer >= 8, got {cells!r}")
    value = -(-int(value) // multiple) * multiple
    if value > max_cells:
        raise LimitError(
            "grid",
            f"{value} cells are more than the limit of {max_cells}; the work grows as the square "
            "of the cell count, so ask for fewer cells or raise max_cells",
        )
    return value


def aggregate_bounds(
    portfolio: Portfolio, top: float, cells: int | None = None, *, max_cells: int = 200_000
) -> AggregateBounds:
    """Lower and upper laws of S on the grid of `cells` cells ending exactly at `top`."""
    grid = Grid.with_top(top=top, cells=_check_cells(cells, max_cells))
    return AggregateBounds(
        grid=grid,
        lower=aggregate(portfolio, grid, "down"),
        upper=aggregate(portfolio, grid, "up"),
    )


def _nearest_estimate(portfolio: Portfolio, x: float, cells: int) -> float:
    """P(S > x) with claims rounded to the nearest point; x itself is a lattice point, and the
    atom there counts half (its mass straddles x), which makes the error of order h^2."""
    law = aggregate(portfolio, Grid.with_top(top=x, cells=cells), "nearest")
    return law.beyond + 0.5 * float(law.pmf[-1])


def _romberg(fine: float, middle: float, coarse: float) -> float:
    """Extrapolation to h = 0 from spans h, 2h, 4h of an error c2 h^2 + c4 h^4 + ..."""
    r_fine = (4.0 * fine - middle) / 3.0
    r_coarse = (4.0 * middle - coarse) / 3.0
    return (16.0 * r_fine - r_coarse) / 15.0


def _zero_threshold(portfolio: Portfolio) -> float:
    # P(S > 0) = 1 - prod over lines of P(N = 0 or every claim is 0) = 1 - prod pgf(P(X = 0))
    log_none = 0.0
    for line in portfolio.lines:
        at_zero = float(line.paid_severity.cdf(0.0))
        count = line.paid_count
        log_none += math.log(count.pgf(at_zero)) if at_zero > 0 else float(count.logpmf(0))
    return -math.expm1(log_none)


def exceedance_bounds(
    portfolio: Portfolio,
    thresholds: Sequence[float],
    *,
    cells: int | None = None,
    max_cells: int = 200_000,
    points: bool = True,
) -> list[tuple[float, float, float]]:
    """(lower, upper, point) for P(S > x) at each threshold x.

    Each threshold gets its own grid of `cells` cells (rounded up to a multiple of 4) ending
    exactly at it, with an absorbing cell above. lower and upper are rigorous bounds, exact up
    to floating-point rounding (and up to 1e-13 absolute where Panjer's complement is used):
    claims rounded down and up or, when every count is fixed or binomial and it is tighter,
    the within-cell refinement (core.discretise.CellSplit), whose gap is of order h^2. point
    rounds claims to the nearest point at spans h, 2h and 4h, extrapolates to h = 0 and is
    kept within the bounds; with points=False it is left out (NaN), for a refinement that
    needs only the bounds' width until its last grid (exceedance_points then adds it).
    """
    n_cells = _check_cells(cells, max_cells, multiple=4)  # the estimate also uses 2h and 4h
    _check_portfolio(portfolio)
    xs = [float(x) for x in thresholds]
    if not xs:
        raise ParameterError("thresholds", "must hold at least one threshold")
    for i, x in enumerate(xs):
        if not math.isfinite(x):
            raise ParameterError(f"thresholds.{i}", f"must be a finite number, got {x!r}")
    out: list[tuple[float, float, float]] = []
    for x in xs:
        if x <= 0.0:
            p = 1.0 if x < 0.0 else _zero_threshold(portfolio)
            out.append((p, p, p))
            continue
        refined = _refined_bounds(portfolio, x, n_cells)
        if refined is None:
            grid = Grid.with_top(top=x, cells=n_cells)
            lower = aggregate(portfolio, grid, "down").beyond
            upper = aggregate(portfolio, grid, "up").beyond
        else:
            lower, upper = refined
        point = _point(portfolio, x, n_cells, lower, upper) if points else math.nan
        out.append((float(lower), float(upper), float(point)))
    return out


def _point(portfolio: Portfolio, x: float, cells: int, lower: float, upper: float) -> float:
    estimates = [_nearest_estimate(portfolio, x, cells // d) for d in (1, 2, 4)]
    return min(max(_romberg(*estimates), lower), upper)


def exceedance_points(
    portfolio: Portfolio, thresholds: Sequence[float], bounds: list[tuple[float, float, float]],
    cells: int,
) -> list[tuple[float, float, float]]:
    """The bounds of exceedance_bounds(..., points=False) on `cells` cells with their point
    estimates filled in (thresholds <= 0 already carry theirs)."""
    n_cells = _check_cells(cells, cells, multiple=4)
    return [(lo, hi, pt if not math.isnan(pt) else
             float(_point(portfolio, float(x), n_cells, lo, hi)))
            for x, (lo, hi, pt) in zip(thresholds, bounds, strict=True)]


# Direct convolutions cost up to the square of the cell count: a grid r times finer is taken to
# cost r^2 times the last one until two grids show the actual growth.
_MAX_JUMP = 8


def refine_cells(
    compute: Callable[[int], T], width_of: Callable[[T], float], target: float | None,
    deadline: float | None, *, start: int = RECURSION_CELLS, limit: int = RECURSION_MAX_CELLS,
    finish_cost: float = 0.0,
) -> tuple[T, int, str, float]:
    """compute(cells) on ever finer grids until width_of(result) <= target: (result, cells,
    what stopped it, its width). With a target the first grid is a quarter of `start` (cheap,
    and it measures the width's and the time's growth). The next grid is the power of two that
    the widths seen so far predict will meet the target (width ~ cells^-p, p fitted from the last
    two grids, 1 before that: plain rounding is first order), at most 8 times finer, and it is
    started only if its predicted time, plus finish_cost times it for work done after the last
    grid, fits before the deadline."""
    cells = start if target is None else max(8, start // 4)
    seen: list[tuple[int, float, float]] = []
    while True:
        began = time.monotonic()
        out = compute(cells)
        width = width_of(out)
        took = time.monotonic() - began
        seen.append((cells, width, took))
        if target is None:
            return out, cells, "samples", width
        if width <= target:
            return out, cells, "relative_error", width
        if 2 * cells > limit:
            return out, cells, "samples", width
        order, cost_order = 1.0, 2.0
        if len(seen) >= 2:
            c0, w0, t0 = seen[-2]
            step = math.log(cells / c0)
            if w0 > width > 0:
                order = min(3.0, max(0.5, math.log(w0 / width) / step))
            if t0 > 0 and took > 0:
                cost_order = min(2.0, max(1.0, math.log(took / t0) / step))
        want = cells * (width / target) ** (1.0 / order) if width > 0 else 2.0 * cells
        jump = 2 ** max(1, math.ceil(math.log2(max(want / cells, 2.0) * 1.05)))
        jump = min(jump, _MAX_JUMP, 2 ** math.floor(math.log2(limit / cells)))
        if deadline is not None:
            left = deadline - time.monotonic()
            unit = took * (1.0 + finish_cost)
            while jump > 2 and jump**cost_order * unit > left:
                jump //= 2
            if jump**cost_order * unit > left:
                return out, cells, "time_limit", width
        cells *= jump


def iid_sum_bounds(
    severity: Severity,
    n: int,
    thresholds: Sequence[float],
    *,
    cells: int | None = None,
    max_cells: int = 200_000,
) -> list[tuple[float, float, float]]:
    """exceedance_bounds for the sum of n independent claims of one law."""
    portfolio = Portfolio(lines=[Line(count=Fixed(n=n), severity=severity)])
    return exceedance_bounds(portfolio, thresholds, cells=cells, max_cells=max_cells)
