"""Estimated exceedance and stop-loss curves on a grid of points, and the risk-measure and
layer records read off them (VaR by inverting the curve, TVaR from the stop-loss transform,
layer losses from differences of stop losses). Shared by core.measures and core.credit."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import replace
from functools import cached_property

import numpy as np

from core.diagnostics import ContributionStats
from core.intervals import Z95, no_hit_upper, normal
from core.invariants import flagged
from core.levels import Layer
from core.results import Diagnostics, Interval, LayerEstimate, MeasureEstimate

# The figure a relative-error target applies to, from the merged statistics.
ErrorOf = Callable[[ContributionStats], float]

GRID = 64
PILOT_SAMPLES = 8192


def _invert(a: np.ndarray, curve: np.ndarray, p: float) -> float | None:
    """The a where a decreasing curve crosses p, interpolating log P linearly in a."""
    above = np.flatnonzero(curve >= p)
    if above.size == 0 or above[-1] == a.size - 1:
        return None
    g = int(above[-1])
    y0, y1 = curve[g], curve[g + 1]
    if y1 > 0 and y0 > 0:
        w = (math.log(y0) - math.log(p)) / (math.log(y0) - math.log(y1))
    else:
        w = (y0 - p) / (y0 - y1) if y0 != y1 else 0.0
    return float(a[g] + min(max(w, 0.0), 1.0) * (a[g + 1] - a[g]))


def _interp_log(a: np.ndarray, y: np.ndarray, x: float) -> float:
    if np.all(y > 0):
        return float(np.exp(np.interp(x, a, np.log(y))))
    return float(np.interp(x, a, y))


class _Curves:
    """Exceedance and stop-loss estimates with bands on the grid, from merged statistics."""

    def __init__(self, a: np.ndarray, stats_: ContributionStats) -> None:
        g = a.size
        mean = np.asarray(stats_.mean(), dtype=float)
        se = np.asarray(stats_.std_error(), dtype=float)
        self.a = a
        self.p, self.p_se = mean[:g], se[:g]
        self.sl, self.sl_se = mean[g:2 * g], se[g:2 * g]
        self.extra, self.extra_se = mean[2 * g:], se[2 * g:]
        self.low = np.maximum(self.p - Z95 * self.p_se, 0.0)
        self.high = self.p + Z95 * self.p_se
        self.stats = stats_

    @cached_property
    def diagnostics(self) -> list[Diagnostics]:
        return self.stats.diagnose()

    def var(self, q: float) -> tuple[float | None, float | None, float | None]:
        p = 1.0 - q
        return _invert(self.a, self.p, p), _invert(self.a, self.low, p), _invert(
            self.a, self.high, p)


def _grid(points: Sequence[float], spread: float) -> np.ndarray:
    lo = max(min(points) * (1.0 - spread), 1e-12)
    hi = max(points) * (1.0 + spread)
    return np.geomspace(lo, hi, GRID)


def _var_error(q: np.ndarray, a: np.ndarray) -> ErrorOf:
    def error_of(stats_: ContributionStats) -> float:
        curves = _Curves(a, stats_)
        worst = 0.0
        for level in q:
            v, lo, hi = curves.var(float(level))
            if v is None or lo is None or hi is None:
                return math.inf
            worst = max(worst, 0.5 * (hi - lo) / v)
        return worst

    return error_of


def point_columns(layers: Sequence[Layer], losses: Sequence[float]) -> list[float]:
    """The points beyond the grid whose exceedance and stop loss a run needs: every layer's
    attachment, then its exhaustion point, then each loss."""
    return [ly.attachment for ly in layers] + [
        ly.attachment + (ly.limit or 0.0) for ly in layers] + list(losses)


def layout_block(
    values: Callable[[int, np.random.Generator], np.ndarray], g: int,
    layers: Sequence[Layer], losses: Sequence[float],
) -> Callable[[int, np.random.Generator], np.ndarray]:
    """From per-sample [exceedance | stop loss] at the grid and `point_columns` to the columns
    _Curves reads: the grid's exceedance and stop loss, then per layer its loss, attachment
    and exhaustion, then P(S > loss) per loss."""
    n_layers = len(layers)
    e = 2 * n_layers + len(losses)

    def block(m: int, rng: np.random.Generator) -> np.ndarray:
        v = values(m, rng)
        exceed, sl = v[:, :g + e], v[:, g + e:2 * (g + e)]
        cols = [exceed[:, :g], sl[:, :g]]
        for i, ly in enumerate(layers):
            top = sl[:, g + n_layers + i] if ly.limit is not None else 0.0
            cols += [(sl[:, g + i] - top)[:, None], exceed[:, g + i:g + i + 1],
                     exceed[:, g + n_layers + i:g + n_layers + i + 1]]
        if len(losses):
            cols.append(exceed[:, g + 2 * n_layers:])
        cols.append(v[:, 2 * (g + e):])  # any further columns (e.g. Euler terms), kept last
        # Differences of monotone per-sample values are >= 0 up to rounding.
        out: np.ndarray = np.maximum(np.hstack(cols), 0.0)
        return out

    return block


def _layer_error(g: int) -> ErrorOf:
    def error_of(stats_: ContributionStats) -> float:
        mean = np.asarray(stats_.mean(), dtype=float)[2 * g:]
        se = np.asarray(stats_.std_error(), dtype=float)[2 * g:]
        with np.errstate(divide="ignore", invalid="ignore"):
            re = np.where(mean > 0, se / mean, np.inf)
        return float(np.max(re)) if re.size else 0.0

    return error_of


def _measure(curves: _Curves, q: float) -> MeasureEstimate:
    v, lo, hi = curves.var(q)
    a = curves.a
    g = int(np.clip(np.searchsorted(a, v if v is not None else a[0]), 0, a.size - 1))
    diag = curves.diagnostics[g]
    if v is None:
        if curves.p[0] < 1.0 - q:  # below the grid: the VaR is in [0, a[0]] (losses >= 0)
            var = Interval(value=float(a[0]), ci_low=0.0, ci_high=float(a[0]))
        else:  # past its top
            var = Interval(value=float(a[-1]), ci_low=float(a[0]), ci_high=float(a[-1]))
        why = (f"the VaR is not bracketed by the estimation grid [{a[0]:.4g}, {a[-1]:.4g}]: "
               "the figure is only the grid's edge")
        return MeasureEstimate(level=q, var=var, tvar=var, diagnostics=flagged(diag, why))
    if lo is None or hi is None:
        # An interval cut at the grid's edge would hide the region beyond it.
        diag = flagged(diag, "the VaR interval runs past the estimation grid "
                             f"[{a[0]:.4g}, {a[-1]:.4g}]: its end there is not a bound")
    lo = lo if lo is not None else float(a[0])
    hi = hi if hi is not None else float(a[-1])
    sl = _interp_log(a, curves.sl, v)
    sl_se = float(np.interp(v, a, curves.sl_se))
    tail = 1.0 - q
    tvar = v + sl / tail
    half = Z95 * sl_se / tail
    return MeasureEstimate(
        level=q,
        var=Interval(value=v, ci_low=min(lo, v), ci_high=max(hi, v)),
        tvar=Interval(value=tvar, ci_low=max(v, tvar - half), ci_high=tvar + half,
                      std_error=sl_se / tail),
        diagnostics=diag,
    )


def _interval(value: float, se: float, n: int, cap: float = 1.0) -> Interval:
    """value +- 1.96 se; with nothing observed, the one-sided 95% bound of core.intervals times
    the largest possible value (1 for a probability, the limit for a layer), never 0 +- 0."""
    if value <= 0.0 and se <= 0.0:
        return Interval(value=0.0, ci_low=0.0, ci_high=no_hit_upper(n, cap), std_error=None)
    low, high = normal(value, se, upper=cap)
    return Interval(value=value, ci_low=low, ci_high=high, std_error=se)


def _layers(curves: _Curves, a: np.ndarray, layers: Sequence[Layer]) -> list[LayerEstimate]:
    out = []
    diags = curves.diagnostics
    for i, ly in enumerate(layers):
        col = 3 * i
        el, el_se = curves.extra[col], curves.extra_se[col]
        n = curves.stats.n
        pa = _interval(float(curves.extra[col + 1]), float(curves.extra_se[col + 1]), n)
        pe = None if ly.limit is None else _interval(float(curves.extra[col + 2]),
                                                     float(curves.extra_se[col + 2]), n)
        out.append(LayerEstimate(
            attachment=ly.attachment, limit=ly.limit,
            expected_loss=_interval(float(el), float(el_se), n,
                                    ly.limit if ly.limit is not None else math.inf),
            probability_attach=pa, probability_exhaust=pe,
            diagnostics=diags[2 * a.size + col],
        ))
    return out


def _losses(curves: _Curves, n_layers: int, losses: Sequence[float]) -> list[Interval]:
    base = 3 * n_layers
    return [_interval(float(curves.extra[base + i]), float(curves.extra_se[base + i]),
                      curves.stats.n)
            for i in range(len(losses))]


def lattice_widened(curves: _Curves, ms: MeasureEstimate) -> MeasureEstimate:
    """The VaR interval widened to the lower lattice loss's lower band and the upper one's
    upper band (their crossings of 1 - q), so the grid error of the line quantiles is inside
    it. The exceedance of the lower and upper lattice losses at the grid points are the last
    2 g columns of the block (layout_block keeps them last); used for dependent lines
    (core.measures) and for the claim lines of a mixed credit book (core.credit.measures)."""
    a = curves.a
    g = a.size
    mean = np.asarray(curves.stats.mean(), dtype=float)
    se = np.asarray(curves.stats.std_error(), dtype=float)
    lower = np.maximum(mean[-2 * g:-g] - Z95 * se[-2 * g:-g], 0.0)
    upper = mean[-g:] + Z95 * se[-g:]
    p = 1.0 - ms.level
    low, high = _invert(a, lower, p), _invert(a, upper, p)
    var = ms.var
    new = Interval(value=var.value,
                   ci_low=min(var.ci_low, low if low is not None else float(a[0])),
                   ci_high=max(var.ci_high, high if high is not None else float(a[-1])),
                   std_error=var.std_error)
    return replace(ms, var=new)
