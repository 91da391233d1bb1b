"""Line quantiles F_i^{-1}(U_i) for copula-coupled lines, with bounds where they are not exact.

A line of one amount (count fixed at 1) has an exact quantile: its per-claim layer pays
h(X) = min(max(X - r, 0), l), a non-decreasing function of X, so F^{-1}(u) = h(F_X^{-1}(u)),
read from the upper-tail uniform through `isf` so far tails keep their digits.

A compound line's aggregate law comes from the deterministic lattice (core.recursion), built
twice: claims rounded down (a stochastically smaller law) and up (a larger one). For the same
uniform the quantile of the smaller law is the smaller, so q_down(U) <= F^{-1}(U) <= q_up(U)
sample by sample: the grid error is carried as a pair of bounds through every functional,
never mixed into the sampling error. Beyond the lattice's top the lower quantile is the top and
the upper one is +inf (the top is placed where that mass is negligible for the request, and an
upper bound that reaches it says so by being infinite).
"""

from __future__ import annotations

import math
import threading
from collections import OrderedDict
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import numpy.typing as npt
from threadpoolctl import ThreadpoolController

from core.counts import Fixed
from core.portfolio import Line, Portfolio

FloatArray = npt.NDArray[np.float64]
CELLS = 4096
# Nested lattices with tops T, T/8, T/64, ... down to the line's mean: each bound is valid, so
# the tightest of them is kept, and the bound width (about E[N] h) stays a small share of the
# quantile at every level.
NESTING_RATIO = 8.0
MAX_LEVELS = 6
FILL_CELLS = 2 * CELLS


@dataclass(frozen=True)
class Lattices:
    survival_low: tuple[FloatArray, ...]  # P(S_down > k h), k = 0..cells, per lattice
    survival_up: tuple[FloatArray, ...]
    spans: tuple[float, ...]


@dataclass(frozen=True)
class LineQuantile:
    """Quantile bounds of one line's aggregate loss (lo == hi where exact)."""

    line: Line
    lattices: Lattices | None = None

    @property
    def exact(self) -> bool:
        return self.lattices is None

    def bounds(self, ubar: FloatArray) -> tuple[FloatArray, FloatArray]:
        """(lower, upper) quantiles at upper-tail uniforms ubar = 1 - U."""
        if self.lattices is None:
            q = _amount_quantile(self.line, ubar)
            return q, q
        edges, lo, hi = self._steps
        idx = np.searchsorted(edges, ubar, side="right")
        return lo[idx], hi[idx]

    @cached_property
    def _steps(self) -> tuple[FloatArray, FloatArray, FloatArray]:
        """The bounds as one step function of ubar: each lattice's quantile depends on ubar
        only through #{k: survival_k > ubar}, so the tightest bounds over all lattices are
        constant between consecutive values of the union of their survivals. Tabulated once
        (at -inf and at each such value), a lookup is one search instead of two per lattice,
        with the same values (sampling, the pilots and the moments' quadrature all call it)."""
        lat = self.lattices
        assert lat is not None
        edges = np.unique(np.concatenate(lat.survival_low + lat.survival_up))
        lo, hi = self._nested(np.concatenate([[-math.inf], edges]))
        return edges, lo, hi

    def _nested(self, ubar: FloatArray) -> tuple[FloatArray, FloatArray]:
        lat = self.lattices
        assert lat is not None
        lo = np.zeros_like(ubar)
        hi = np.full_like(ubar, math.inf)
        for s_lo, s_up, h in zip(lat.survival_low, lat.survival_up, lat.spans, strict=True):
            lo = np.maximum(lo, _lattice_quantile(s_lo, h, ubar, top_value=None))
            hi = np.minimum(hi, _lattice_quantile(s_up, h, ubar, top_value=math.inf))
        return lo, hi


def _amount_quantile(line: Line, ubar: FloatArray) -> FloatArray:
    sev = line.severity
    x = np.asarray(sev.isf(np.clip(ubar, 1e-300, 1.0)), dtype=float)
    if line.retention is not None:
        x = np.maximum(x - line.retention, 0.0)
    if line.limit is not None:
        x = np.minimum(x, line.limit)
    return x


def _lattice_quantile(survival: FloatArray, span: float, ubar: FloatArray,
                      top_value: float | None) -> FloatArray:
    """min{k h : P(Y > k h) <= ubar}; beyond the top: the top (lower law) or +inf (upper)."""
    # survival is non-increasing: search on its reverse.
    rev = survival[::-1]
    k = survival.size - np.searchsorted(rev, ubar, side="right")
    out = k.astype(float) * span
    beyond = k >= survival.size
    fill = (survival.size - 1) * span if top_value is None else top_value
    return np.where(beyond, fill, out)


_CACHE: list[tuple[Portfolio, tuple[float, float | None], list[LineQuantile]]] = []


def line_quantiles(portfolio: Portfolio, smallest_tail: float, top: float | None = None
                   ) -> list[LineQuantile]:
    """One quantile object per line; lattices reach where each line's upper-law tail is below
    1e-3 * smallest_tail (so beyond-the-top draws are negligible for the request), or only to
    `top` when every figure asked for is an exceedance of a point below it (a line beyond
    `top` then exceeds every such point, in both bounds). The last few are kept: the pilot
    and the main run of one request share them."""
    key = (smallest_tail, top)
    for cached, k, value in _CACHE:
        if cached is portfolio and k == key:
            return value
    out = _build(portfolio, smallest_tail, top)
    _CACHE.append((portfolio, key, out))
    del _CACHE[:-4]
    return out


_PAIRS: OrderedDict[tuple[Line, float, int], tuple[FloatArray, FloatArray, float]] = (
    OrderedDict())
_PAIRS_KEPT = 64  # lattice pairs kept (about 64 * 2 * 8k floats = 8 MB at most)
_PAIRS_LOCK = threading.Lock()
_THREADS: list[ThreadpoolController] = []  # one controller: each scans the loaded libraries


def _controller() -> ThreadpoolController:
    """Built once, after the recursion's imports have loaded the BLAS it calls (numpy's and
    scipy.linalg's), which are the libraries it must see."""
    if not _THREADS:
        import core.recursion  # noqa: F401  (loads scipy.linalg before the scan)

        _THREADS.append(ThreadpoolController())
    return _THREADS[0]


def _pair(line: Line, top: float, cells: int) -> tuple[FloatArray, FloatArray, float]:
    """(survival rounded down, survival rounded up, span) of one line on the grid of `top`
    and `cells`, by Panjer's recursion (exact_tail=False: the survival is summed from the pmf,
    whose entries keep their relative accuracy far below 1e-6). Kept by value of the line, so
    that requests on the same lines (other thresholds, another copula, a pilot and its main
    run) build each lattice once; the arrays are read-only."""
    from core.discretise import Grid
    from core.recursion import aggregate

    key = (line, float(top), int(cells))
    # One builder at a time: the BLAS thread limit below is process-wide.
    with _PAIRS_LOCK:
        hit = _PAIRS.get(key)
        if hit is not None:
            _PAIRS.move_to_end(key)
            return hit
        single = Portfolio(lines=[line])
        grid = Grid.with_top(top=top, cells=cells)
        # One BLAS thread: the recursion's blocked products are too small to share among
        # threads, and on a busy machine the extra threads spin (measured: 2.2 s of CPU for
        # one request's lattices with two threads, 0.5 s with one; same values).
        with _controller().limit(limits=1, user_api="blas"):
            low = aggregate(single, grid, "down", exact_tail=False).survival()
            up = aggregate(single, grid, "up", exact_tail=False).survival()
        low.flags.writeable = False
        up.flags.writeable = False
        _PAIRS[key] = (low, up, grid.span)
        while len(_PAIRS) > _PAIRS_KEPT:
            _PAIRS.popitem(last=False)
        return low, up, grid.span


def _build(portfolio: Portfolio, smallest_tail: float, top_at: float | None
           ) -> list[LineQuantile]:
    out = []
    for line in portfolio.lines:
        if isinstance(line.count, Fixed) and line.count.n == 1:
            out.append(LineQuantile(line))
            continue
        top = _lattice_top(line, 1e-3 * smallest_tail)
        if top_at is not None:
            top = min(top, top_at)
        lows, ups, spans = [], [], []
        tops, main = _tops(top, line.mean)
        if top_at is not None:
            # Exceedance only: the fill lattices tighten the body's quantiles for VaR
            # intervals; at an exceedance threshold the main lattices' bounds hold as well,
            # and their width is carried into the interval (slightly wider, never dropped).
            tops = tops[:main]
        for k, level_top in enumerate(tops):
            low, up, span = _pair(line, level_top, CELLS if k < main else FILL_CELLS)
            lows.append(low)
            ups.append(up)
            spans.append(span)
        out.append(LineQuantile(line, Lattices(tuple(lows), tuple(ups), tuple(spans))))
    return out


def with_reach(quantiles: tuple[LineQuantile, ...], tail: float
               ) -> tuple[LineQuantile, ...]:
    """The same bounds with one lattice more per compound line whose largest top is short of
    the point where the line's tail is below `tail` (moments need the whole range; a request
    of exceedance builds lattices only up to its thresholds). Adding a lattice keeps every
    bound valid: the bounds are the tightest over the lattices."""
    out = []
    for q in quantiles:
        lat = q.lattices
        if lat is None:
            out.append(q)
            continue
        top = _lattice_top(q.line, tail)
        reach = max(s.size * h for s, h in zip(lat.survival_low, lat.spans, strict=True))
        lows, ups, spans = list(lat.survival_low), list(lat.survival_up), list(lat.spans)
        while top > reach:  # T, T/8, ... down to the lattices there are
            low, up, span = _pair(q.line, top, CELLS)
            lows.append(low)
            ups.append(up)
            spans.append(span)
            top /= NESTING_RATIO
        out.append(LineQuantile(q.line, Lattices(tuple(lows), tuple(ups), tuple(spans))))
    return tuple(out)


def _tops(top: float, mean: float) -> tuple[list[float], int]:
    """Lattice tops T, T/8, ... down to the line's mean (the first `main` of the list, at
    CELLS cells), then halvings of the two smallest (FILL_CELLS cells, above the mean): the
    body and the near tail are where a line sits in a tail scenario of the sum at the levels
    capital is set at, and there the bound width (about E[N] h) is what widens a VaR interval
    (Poisson(20) gamma(2) beside Poisson(5) lognormal(0, 1.5) at 0.995: relative half-width
    0.77% with the main lattices alone, of which 0.34% is sampling)."""
    tops = [t for t in (top / NESTING_RATIO**k for k in range(MAX_LEVELS)) if t >= mean]
    tops = tops or [top]
    main = len(tops)
    fill = [t / 2.0**j for t in tops[-2:] for j in (1, 2)]
    return tops + [t for t in fill if t >= mean], main


def _lattice_top(line: Line, tail: float) -> float:
    """A point whose exceedance is below `tail`: the largest of the mean plus 12 sd, and the
    single-claim bound isf(tail / (E N + 4 sd N)) plus the mean (Boecker-Klueppelberg-style)."""
    count, sev = line.paid_count, line.paid_severity
    n_hi = count.mean + 6.0 * math.sqrt(max(count.variance, 0.0)) + 5.0
    single = float(sev.isf(min(0.5, tail / n_hi)))
    return float(max(line.mean + 12.0 * math.sqrt(line.variance), line.mean + single * 2.0,
                     1e-6))
