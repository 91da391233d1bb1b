"""VaR, TVaR, layer losses and P(S > loss) as rigorous lower and upper bounds from the
discretised laws of core.recursion (claims rounded down and up), with a point estimate from
claims rounded to the nearest point.

Every figure here is monotone in the stochastic order (VaR, TVaR = VaR + E[(S - VaR)+]/(1-q),
E[min((S - a)+, l)] and P(S > a) all grow when S grows), so the law with claims rounded down
gives lower bounds and the one rounded up upper bounds. Stop-loss transforms beyond the grid use
E[(S - v)+] = E[S] - v + E[(v - S)+], with the means of the rounded laws bounded from the
severities' survival functions on the grid (see _rounded_means).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence

import numpy as np

from core.discretise import Grid, Lattice
from core.errors import LimitError, MethodError
from core.levels import Layer, guess_var, largest_claim_var
from core.portfolio import Portfolio
from core.recursion import aggregate
from core.results import Diagnostics, Interval, LayerEstimate, MeasureEstimate, TailResult

DEFAULT_CELLS = 16_384


def _var(law: Lattice, h: float, q: float) -> float:
    """Smallest grid point v with P(Y > v) <= 1 - q."""
    s = law.survival()
    k = np.flatnonzero(s <= 1.0 - q)
    if k.size == 0:
        raise LimitError("grid", "the level's VaR lies beyond the grid top")
    return float(k[0]) * h


def _below(law: Lattice, h: float, v: float) -> float:
    """E[(v - Y)+] from the grid."""
    k = np.arange(law.pmf.size)
    gap = np.maximum(v - k * h, 0.0)
    return float(gap @ law.pmf)


def _stop_loss(law: Lattice, h: float, v: float, mean: float) -> float:
    return max(mean - v + _below(law, h, v), 0.0)


def _capped_layer(law: Lattice, h: float, a: float, limit: float) -> float:
    pays = np.minimum(np.maximum(np.arange(law.pmf.size) * h - a, 0.0), limit)
    return float(pays @ law.pmf) + law.beyond * limit


def _exceed(low: Lattice, up: Lattice, h: float, x: float) -> tuple[float, float]:
    ratio = x / h
    above = min(math.ceil(ratio - 1e-12), low.cells)
    below = max(math.floor(ratio + 1e-12), 0)
    return low.exceedance(above), up.exceedance(below)


def _rounded_means(portfolio: Portfolio, h: float, cells: int) -> tuple[float, float]:
    """(lower bound of E[S] with claims rounded down, upper bound with claims rounded up).

    Rounded up, a claim is h ceil(Y/h) with mean h sum_{j>=0} P(Y > jh); rounded down,
    h (ceil(Y/h) - 1) with mean h sum_{j>=1} P(Y > jh). Terms beyond the grid are bounded by
    the tail integrals E[(Y - top)+] (above) and E[(Y - top - h)+] (below)."""
    low = up = 0.0
    points = np.arange(cells + 1, dtype=float) * h
    for line in portfolio.lines:
        sev, n = line.paid_severity, line.paid_count.mean
        sf = np.asarray(sev.sf(points), dtype=float)
        beyond_up = max(float(sev.mean) - float(sev.lev(points[-1])), 0.0)
        beyond_low = max(float(sev.mean) - float(sev.lev(points[-1] + h)), 0.0)
        up += n * (h * math.fsum(sf) + beyond_up)
        low += n * (h * math.fsum(sf[1:]) + beyond_low)
    return low, up


def tail_bounds(
    portfolio: Portfolio, *, levels: Sequence[float] = (), layers: Sequence[Layer] = (),
    losses: Sequence[float] = (), cells: int = DEFAULT_CELLS, seed: int = 0,
) -> TailResult:
    start = time.monotonic()
    mean = portfolio.mean
    if not math.isfinite(mean):
        raise MethodError("portfolio", "TVaR and layer losses need a finite mean claim")
    tops = [2.0 * guess_var(portfolio, float(q)) for q in levels]
    tops += [1.05 * (ly.attachment + (ly.limit or 0.0)) for ly in layers]
    tops += [1.05 * float(x) for x in losses] + [2.0 * mean + 1e-9]
    top = max(tops)
    tail = min([1.0 - float(q) for q in levels] or [1.0])
    for _ in range(8):
        grid = Grid.with_top(top=top, cells=cells)
        up = aggregate(portfolio, grid, "up")
        if up.beyond < 0.5 * tail or not levels:
            break
        top *= 2.0
    else:
        raise LimitError("grid", "could not place the levels' VaR on a grid of this size")
    h = grid.span
    low = aggregate(portfolio, grid, "down")
    near = aggregate(portfolio, grid, "nearest")
    mean_low, mean_up = _rounded_means(portfolio, h, cells)
    diag = Diagnostics.on_grid(cells)
    measures = []
    for q in levels:
        q = float(q)
        v_lo, v_up, v_pt = _var(low, h, q), _var(up, h, q), _var(near, h, q)
        es_lo = v_lo + _stop_loss(low, h, v_lo, mean_low) / (1.0 - q)
        # TVaR(S) >= TVaR(S rounded down) above; VaR(S) also >= the largest claim's bound
        v_lo = min(max(v_lo, largest_claim_var(portfolio, q)), v_up)
        es_lo = max(es_lo, v_lo)
        v_pt = min(max(v_pt, v_lo), v_up)
        es_up = v_up + _stop_loss(up, h, v_up, mean_up) / (1.0 - q)
        es_pt = min(max(v_pt + _stop_loss(near, h, v_pt, mean) / (1.0 - q), es_lo), es_up)
        measures.append(MeasureEstimate(
            level=q, var=Interval(value=v_pt, ci_low=v_lo, ci_high=v_up),
            tvar=Interval(value=es_pt, ci_low=es_lo, ci_high=es_up), diagnostics=diag))
    out_layers = []
    for ly in layers:
        a, lim = ly.attachment, ly.limit
        if lim is None:
            el_lo = _stop_loss(low, h, a, mean_low)
            el_up = _stop_loss(up, h, a, mean_up)
            el_pt = _stop_loss(near, h, a, mean)
            exhaust = None
        else:
            el_lo, el_up = _capped_layer(low, h, a, lim), _capped_layer(up, h, a, lim)
            el_pt = _capped_layer(near, h, a, lim)
            e_lo, e_up = _exceed(low, up, h, a + lim)
            exhaust = Interval(value=0.5 * (e_lo + e_up), ci_low=e_lo, ci_high=e_up)
        p_lo, p_up = _exceed(low, up, h, a)
        out_layers.append(LayerEstimate(
            attachment=a, limit=lim,
            expected_loss=Interval(value=min(max(el_pt, el_lo), el_up), ci_low=el_lo,
                                   ci_high=el_up),
            probability_attach=Interval(value=0.5 * (p_lo + p_up), ci_low=p_lo, ci_high=p_up),
            probability_exhaust=exhaust, diagnostics=diag))
    loss_out = []
    for x in losses:
        p_lo, p_up = _exceed(low, up, h, float(x))
        loss_out.append(Interval(value=0.5 * (p_lo + p_up), ci_low=p_lo, ci_high=p_up))
    return TailResult(
        method="recursion", method_reason="deterministic lower and upper bounds requested",
        seed=seed, elapsed_s=time.monotonic() - start, stopped_by="samples", samples=0,
        mean=mean, std_dev=portfolio.std_dev, measures=measures, layers=out_layers,
        loss_exceedance=loss_out)
