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
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import stats
from scipy.linalg import solve_triangular

from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.discretise import (
    TINY,
    CellSplit,
    Grid,
    Lattice,
    Rounding,
    convolution_power,
    convolve,
    convolve_window,
    discretise,
    flush,
    point_mass,
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
    "iid_sum_bounds",
]

_Floats = NDArray[np.float64]

DEFAULT_CELLS = 8192
# method=recursion starts at RECURSION_CELLS and doubles towards its precision target.
RECURSION_CELLS = 8192
RECURSION_MAX_CELLS = 131_072
_LEAF = 64  # the Panjer recursion solves ranges this short as one triangular system
# The recursion starts from P(S = 0) and zeroes values below TINY (1e-150) on the way, so its
# start must stay well above TINY: a count with log P(S = 0) below this is split into equal
# independent parts (Poisson and negative binomial laws are infinitely divisible).
_LOG_START_MIN = -300.0
# Panjer's mass beyond the top is 1 - sum, good to ~1e-16 absolute: the bounds are widened by
# this much, and below _COMPLEMENT_MIN the exact count series is used instead.
_COMPLEMENT_SLACK = 1e-13
_COMPLEMENT_MIN = 1e-6
_SERIES_TAIL = 1e-40  # P(N > M) left out of the count series (kept in the upper bound)
_SERIES_MAX = 1 << 16
_WORK_MAX = 1e12  # multiply-adds allowed for one count series (about a minute)


# ------------------------------------------------------------------------ Panjer recursion


def _panjer(f: _Floats, a: float, b: float, log_start: float) -> _Floats:
    """P(S = k), k < len(f), for a count law of the (a, b, 0) class and claim masses f.

    Panjer's recursion g_k = sum_j (a + b j / k) f_j g_{k-j} / (1 - a f_0), written with the
    weight split as a (k - j)/k + (a + b) j/k so that both parts are >= 0 whenever a >= 0 and
    a + b > 0 (Poisson: a = 0; negative binomial: a = beta/(1+beta), a + b = a r > 0):

        k (1 - a f_0) g_k = a sum_j f_j (k - j) g_{k-j} + (a + b) sum_j j f_j g_{k-j}.

    Both sums are convolutions of known claim masses with already computed g. They are done by
    divide and conquer: solve the first half of a range, add its whole contribution to the second
    half with one blocked convolution, then solve the second half. Short ranges are a small
    triangular system whose forward substitution again adds positive terms only.
    """
    n = f.size
    g, acc_a, acc_ab = np.zeros(n), np.zeros(n), np.zeros(n)
    k_all = np.arange(n, dtype=np.float64)
    jf = k_all * f
    ab = a + b
    diag = k_all * (1.0 - a * f[0])
    diag[0] = 1.0
    start = math.exp(log_start)

    def leaf(lo: int, hi: int) -> None:
        k = np.arange(lo, hi)
        lag = k[:, None] - k[None, :]
        lag_ok = np.maximum(lag, 0)
        weight = np.where(lag > 0, a * f[lag_ok] * k[None, :] + ab * jf[lag_ok], 0.0)
        rhs = a * acc_a[lo:hi] + ab * acc_ab[lo:hi]
        if lo == 0:
            rhs[0], weight[0, :] = start, 0.0
        values = _forward_substitution(np.diag(diag[lo:hi]) - weight, rhs)
        g[lo:hi] = np.where(values < TINY, 0.0, values)
        if lo == 0:
            g[0] = start

    def solve(lo: int, hi: int) -> None:
        if hi - lo <= _LEAF:
            leaf(lo, hi)
            return
        mid = (lo + hi) // 2
        solve(lo, mid)
        span = hi - lo
        acc_ab[mid:hi] += convolve_window(g[lo:mid], jf[:span], mid - lo, span)
        if a != 0.0:
            acc_a[mid:hi] += convolve_window(k_all[lo:mid] * g[lo:mid], f[:span], mid - lo, span)
        solve(mid, hi)

    solve(0, n)
    return g


def _forward_substitution(matrix: _Floats, rhs: _Floats) -> _Floats:
    # lower triangular with a positive diagonal and non-positive entries below it: every step of
    # the substitution adds non-negative terms
    return np.asarray(solve_triangular(matrix, rhs, lower=True, check_finite=False))


def _panjer_compound(claim: Lattice, a: float, b: float, log_start: float) -> Lattice:
    """Compound law from the recursion. Claim mass too small to keep (see discretise.TINY) is
    read as a claim of 0, so P(S = 0) and the recursion use one consistent claim law."""
    f = claim.pmf.copy()
    moving = math.fsum(f[1:]) + claim.beyond  # P(claim > 0)
    f[0] = max(0.0, 1.0 - moving)
    g = _panjer(f, a, b, log_start)
    # The recursion gives P(S = k) for k <= K only, so here (and only here) the mass beyond the
    # top is a complement. Its round-off is about 1e-16 absolute; the bounds are widened by
    # _COMPLEMENT_SLACK, and aggregate() switches to the count series when the tail is small.
    beyond = max(0.0, 1.0 - math.fsum(g))
    if claim.rounding == "up":
        beyond = min(1.0, beyond + _COMPLEMENT_SLACK)
    elif claim.rounding == "down":
        beyond = max(0.0, beyond - _COMPLEMENT_SLACK)
    return flush(Lattice(pmf=g, beyond=beyond, rounding=claim.rounding))


def _poisson(claim: Lattice, mean: float) -> Lattice:
    moving = math.fsum(claim.pmf[1:]) + claim.beyond
    parts = _parts(-mean * moving)
    base = _panjer_compound(claim, 0.0, mean / parts, -mean * moving / parts)
    return convolution_power(base, parts)


def _negative_binomial(claim: Lattice, count: NegativeBinomial) -> Lattice:
    moving = math.fsum(claim.pmf[1:]) + claim.beyond
    log_start = -count.r * math.log1p(count.beta * moving)  # P(S = 0) = (1 + beta P(X>0))^-r
    parts = _parts(log_start)
    a = count.beta / (1.0 + count.beta)
    base = _panjer_compound(claim, a, (count.r / parts - 1.0) * a, log_start / parts)
    return convolution_power(base, parts)


def _parts(log_start: float) -> int:
    return max(1, math.ceil(log_start / _LOG_START_MIN))


# ------------------------------------------------------------------------ count series


def _count_tail(count: ClaimCount) -> Any:
    """The scipy law of the count, for far-tail P(N > m) (computed without complements)."""
    if isinstance(count, Poisson):
        return stats.poisson(count.mean)
    if isinstance(count, NegativeBinomial):
        return stats.nbinom(count.r, 1.0 / (1.0 + count.beta))
    raise ParameterError("count", f"no count series for {count!r}")


def _series_length(count: ClaimCount) -> int:
    """Smallest M with P(N > M) <= _SERIES_TAIL."""
    law = _count_tail(count)
    hi = max(1, math.ceil(count.mean))
    while law.sf(hi) > _SERIES_TAIL:
        hi *= 2
        if hi > _SERIES_MAX:
            raise LimitError(
                "grid",
                f"the count {count!r} has P(N > {_SERIES_MAX}) > {_SERIES_TAIL:g}: its far tail "
                "is too long for the exact count series; ask for a larger threshold-probability "
                "or use a Monte Carlo method",
            )
    lo = hi // 2
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (lo, mid) if law.sf(mid) <= _SERIES_TAIL else (mid, hi)
    return hi


def _combine(weights: _Floats, laws: Sequence[Lattice]) -> Lattice:
    """sum_i weights[i] laws[i] (weights may be fewer than laws)."""
    pmf = np.zeros(laws[0].cells + 1)
    beyond = 0.0
    for w, law in zip(weights, laws[: weights.size], strict=True):
        if w > 0.0:
            pmf += w * law.pmf
            beyond += w * law.beyond
    return Lattice(pmf=pmf, beyond=beyond, rounding=laws[0].rounding)


def _add(a: Lattice, b: Lattice) -> Lattice:
    return Lattice(pmf=a.pmf + b.pmf, beyond=a.beyond + b.beyond, rounding=a.rounding)


def _check_series_work(count: ClaimCount, convolutions: int, cells: int) -> None:
    work = convolutions * (cells + 1) ** 2 / 2
    if work > _WORK_MAX:
        raise LimitError(
            "grid",
            f"the exact tail for {count!r} needs {convolutions} convolutions of {cells + 1} "
            f"cells ({work:.2g} multiply-adds, limit {_WORK_MAX:.2g}); use fewer cells or a "
            "Monte Carlo method",
        )


def _count_series(claim: Lattice, count: ClaimCount) -> Lattice:
    """sum_{n <= M} P(N = n) claim^{*n}, with P(N > M) <= _SERIES_TAIL put beyond the top for
    an upper bound (dropped otherwise): exact in the far tail, positive terms only.

    The polynomial in the claim law is evaluated by Paterson and Stockmeyer's baby-step
    giant-step scheme: the powers 0 .. s-1 with s ~ sqrt(M + 1), then Horner's rule in
    claim^{*s}; about 2 sqrt(M) convolutions instead of M.
    """
    m = _series_length(count)
    weights = np.asarray(count.pmf(np.arange(m + 1)), dtype=np.float64)
    s = max(1, math.isqrt(m + 1))
    _check_series_work(count, s + (m + 1) // s, claim.cells)
    powers = [point_mass(claim)]
    while len(powers) <= s:  # one more than needed: the last one is the giant step
        powers.append(convolve(powers[-1], claim) if len(powers) > 1 else claim)
    giant = powers.pop()
    blocks = [_combine(weights[j : j + s], powers) for j in range(0, m + 1, s)]
    total = blocks.pop()
    for block in reversed(blocks):
        total = _add(convolve(giant, total), block)
    if claim.rounding == "up":
        rest = float(_count_tail(count).sf(m))
        total = Lattice(pmf=total.pmf, beyond=min(1.0, total.beyond + rest), rounding="up")
    return flush(total)


def compound(count: ClaimCount, claim: Lattice, *, exact_tail: bool = False) -> Lattice:
    """The law of the sum of N independent claims (claim law on a lattice), N ~ count.

    Poisson and negative binomial counts use Panjer's recursion, or with `exact_tail` the count
    series, which carries the mass beyond the top exactly (for far tails, below ~1e-6).
    """
    if isinstance(count, Fixed):
        return convolution_power(claim, count.n)
    if isinstance(count, Binomial):
        # each trial pays a claim with the count's probability, else nothing
        p = count.probability
        pmf = p * claim.pmf
        pmf[0] += 1.0 - p
        trial = flush(Lattice(pmf=pmf, beyond=p * claim.beyond, rounding=claim.rounding))
        return convolution_power(trial, count.trials)
    if exact_tail and isinstance(count, Poisson | NegativeBinomial):
        return _count_series(claim, count)
    if isinstance(count, Poisson):
        return _poisson(claim, count.mean)
    if isinstance(count, NegativeBinomial):
        return _negative_binomial(claim, count)
    raise ParameterError("count", f"the recursion does not know the count law {count!r}")


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
    if exact_tail is None and randoms and total.beyond < _COMPLEMENT_MIN:
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
) -> list[tuple[float, float, float]]:
    """(lower, upper, point) for P(S > x) at each threshold x.

    Each threshold gets its own grid of `cells` cells (rounded up to a multiple of 4) ending
    exactly at it, with an absorbing cell above. lower and upper are rigorous bounds, exact up
    to floating-point rounding (and up to 1e-13 absolute where Panjer's complement is used):
    claims rounded down and up or, when every count is fixed or binomial and it is tighter,
    the within-cell refinement (core.discretise.CellSplit), whose gap is of order h^2. point
    rounds claims to the nearest point at spans h, 2h and 4h, extrapolates to h = 0 and is
    kept within the bounds.
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
        estimates = [_nearest_estimate(portfolio, x, n_cells // d) for d in (1, 2, 4)]
        point = min(max(_romberg(*estimates), lower), upper)
        out.append((float(lower), float(upper), float(point)))
    return out


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
