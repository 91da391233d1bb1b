"""Value-at-risk, tail value-at-risk, aggregate layers and exceedance curves from one sample
set of the variance-reduced estimators.

The exceedance function and the stop-loss transform are estimated on a grid of points around
the pilot's VaR figures (plus every layer's attachment and exhaustion points) from the same
samples. VaR inverts the estimated exceedance function; its interval inverts the pointwise 95%
band of P(S > a) (the test-inversion interval for a quantile). TVaR is VaR plus the stop-loss
transform at VaR over 1 - level, with the stop-loss standard error (the delta method: the
derivative of TVaR in VaR vanishes at the true VaR).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from functools import cached_property

import numpy as np

from core.diagnostics import ContributionStats
from core.estimators import registry, select
from core.estimators.base import Group, work_per_sample
from core.exceedance import check_seed
from core.intervals import Z95, no_hit_upper, normal
from core.invariants import check_tail
from core.levels import Layer, check_levels, guess_var
from core.portfolio import Portfolio
from core.precision import GroupRun, Precision, run_group
from core.results import Diagnostics, Interval, LayerEstimate, MeasureEstimate, TailResult
from core.sampling import block_size
from core.streams import Purpose, Stream

# Layer and the result records live in core.levels and core.results; named here for callers.
__all__ = [
    "Interval",
    "Layer",
    "LayerEstimate",
    "MeasureEstimate",
    "TailResult",
    "tail_estimates",
]

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


def _pilot_vars(name: str, portfolio: Portfolio, q: np.ndarray, seed: int) -> list[float]:
    guesses = [guess_var(portfolio, float(level)) for level in q]
    a = np.geomspace(max(min(guesses) / 20.0, 1e-9), max(guesses) * 20.0, 160)
    pilot = registry.get(registry.get(name).grid_pilot or name)
    values = pilot.contributions(portfolio, a, guesses, seed)
    stats_ = ContributionStats.from_samples(
        values(PILOT_SAMPLES, Stream(Purpose.MEASURE_PILOT, pilot.stream).rng(seed, 0)))
    curves = _Curves(a, stats_)
    out = []
    for level, guess in zip(q, guesses, strict=True):
        v = curves.var(float(level))[0]
        out.append(v if v is not None else guess)
    return out


def tail_estimates(
    portfolio: Portfolio, *, levels: Sequence[float] = (), layers: Sequence[Layer] = (),
    losses: Sequence[float] = (), method: str = "auto", precision: Precision | None = None,
    seed: int | None = None,
) -> TailResult:
    """VaR and TVaR at `levels`, `layers` losses and P(S > loss) for `losses`, from one
    sample set. With `auto`, a result with a figure flagged unreliable is redone with the
    next candidate (at most one per estimator family), and the first fully reliable one is
    kept; when none is, the first is returned with its flags."""
    start = time.monotonic()
    seed = check_seed(seed)
    precision = precision or Precision()
    q = check_levels(levels) if len(levels) else np.zeros(0)
    if method != registry.AUTO and registry.get(method).deterministic:
        return registry.get(method).tail_bounds(portfolio, levels=list(q), layers=layers,
                                                losses=losses, seed=seed)
    names, reason = _choose(portfolio, q, _extra_points(layers, losses), method, seed)
    first: TailResult | None = None
    for name in names:
        result = _estimate(name, portfolio, q, layers, losses, precision, seed, start, reason)
        if first is None:
            first = result
        if _all_reliable(result):
            if result is not first:
                result.warnings.insert(0, f"{first.method} was flagged unreliable; "
                                          f"re-estimated with {name}")
            return result
    assert first is not None
    return first


def _extra_points(layers: Sequence[Layer], losses: Sequence[float]) -> list[float]:
    return [ly.attachment for ly in layers] + [
        ly.attachment + ly.limit for ly in layers if ly.limit is not None] + list(losses)


def _all_reliable(result: TailResult) -> bool:
    return all(m.diagnostics.reliable for m in result.measures) and all(
        ly.diagnostics.reliable for ly in result.layers)


def _estimate(name: str, portfolio: Portfolio, q: np.ndarray, layers: Sequence[Layer],
              losses: Sequence[float], precision: Precision, seed: int, start: float,
              reason: str) -> TailResult:
    anchors = _pilot_vars(name, portfolio, q, seed) if q.size else []
    anchors += [x for x in _extra_points(layers, losses) if x > 0]
    anchors = anchors or [portfolio.mean]
    spread = 0.05
    warnings: list[str] = []
    for attempt in range(3):
        a = _grid(anchors, spread)
        curves, run = _run(name, portfolio, a, q, layers, losses, anchors, precision, seed,
                           start)
        missing = [float(level) for level in q if None in curves.var(float(level))]
        if not missing:
            break
        spread *= 4.0
        if attempt == 2:
            warnings.append(f"VaR interval at levels {missing} runs past the estimation grid; "
                            "increase samples")
    measures = [_measure(curves, float(level)) for level in q]
    layer_out = _layers(curves, a, layers)
    loss_out = _losses(curves, len(layers), losses)
    measures, layer_out, notes = check_tail(measures, layer_out)
    warnings += notes
    if run.stopped_by == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    for m in measures:
        if not m.diagnostics.reliable:
            warnings.append(f"level {m.level:g}: flagged unreliable: {m.diagnostics.reason}")
    for ly in layer_out:
        if not ly.diagnostics.reliable:
            warnings.append(f"layer {ly.attachment:g} xs: flagged unreliable: "
                            f"{ly.diagnostics.reason}")
    return TailResult(
        method=name, method_reason=reason, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by=run.stopped_by, samples=run.samples, mean=portfolio.mean,
        std_dev=portfolio.std_dev, measures=measures, layers=layer_out,
        loss_exceedance=loss_out, warnings=warnings,
    )


def _choose(portfolio: Portfolio, q: np.ndarray, extra: list[float], method: str,
            seed: int) -> tuple[list[str], str]:
    """Candidate names, best first, and the reason in words."""
    if method != registry.AUTO:
        return [method], f"{method} requested"
    points = [guess_var(portfolio, float(level)) for level in q] + [x for x in extra if x > 0]
    # The pilot compares estimators at the extreme points only: it costs a pilot per point.
    probe = sorted(points)[:: max(1, len(points) - 1)] if points else [portfolio.mean]
    trials, reason = select.choose(portfolio, np.asarray(probe), seed)
    return [t.name for t in trials], reason


def _run(name: str, portfolio: Portfolio, a: np.ndarray, q: np.ndarray, layers: Sequence[Layer],
         losses: Sequence[float], anchors: Sequence[float], precision: Precision, seed: int,
         start: float) -> tuple[_Curves, GroupRun]:
    """Main run: the grid's exceedance and stop-loss columns, then per layer its loss,
    attachment and exhaustion columns, then P(S > loss) per loss."""
    n_layers = len(layers)
    extra = [ly.attachment for ly in layers] + [
        ly.attachment + (ly.limit or 0.0) for ly in layers] + list(losses)
    values = registry.get(name).contributions(
        portfolio, np.concatenate([a, np.asarray(extra, dtype=float)]), anchors, seed)
    g, e = a.size, len(extra)

    def block(m: int, rng: np.random.Generator) -> np.ndarray:
        v = values(m, rng)
        exceed, sl = v[:, :g + e], v[:, g + e:]
        cols = [exceed[:, :g], sl[:, :g]]
        for i, ly in enumerate(layers):
            top = sl[:, g + n_layers + i] if ly.limit is not None else 0.0
            cols += [(sl[:, g + i] - top)[:, None], exceed[:, g + i:g + i + 1],
                     exceed[:, g + n_layers + i:g + n_layers + i + 1]]
        if len(losses):
            cols.append(exceed[:, g + 2 * n_layers:])
        # Differences of monotone per-sample values are >= 0 up to rounding.
        out: np.ndarray = np.maximum(np.hstack(cols), 0.0)
        return out

    group = Group((0,), block, work_per_sample(portfolio.expected_claims, 2 * (g + e)), name)
    deadline = None if precision.time_limit_s is None else start + precision.time_limit_s
    error_of = _var_error(q, a) if q.size else _layer_error(g)
    run = run_group(group, block_size(portfolio), precision, seed,
                    Stream(Purpose.MEASURE_SAMPLES, registry.get(name).stream), deadline,
                    error_of=error_of)
    return _Curves(a, run.stats), run


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
        nan_safe = float(a[-1])
        var = Interval(value=nan_safe, ci_low=float(a[0]), ci_high=nan_safe)
        return MeasureEstimate(level=q, var=var, tvar=var, diagnostics=diag)
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
