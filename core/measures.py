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
from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np
from scipy import stats

from core.diagnostics import ContributionStats
from core.errors import MethodError, ParameterError
from core.estimators import select
from core.estimators.base import Group, work_per_sample
from core.exceedance import Z95, check_seed
from core.functionals import sampler
from core.invariants import check_tail, flagged
from core.portfolio import Portfolio

if TYPE_CHECKING:
    from core.credit.model import CreditModel
from core.precision import Precision, run_group
from core.results import Diagnostics
from core.sampling import PILOT, block_rng, block_size

GRID = 64
PILOT_SAMPLES = 8192
_STREAM = 5 << 24


@dataclass(frozen=True, kw_only=True)
class Layer:
    """An aggregate layer: pays min((S - attachment)+, limit); limit None = unlimited."""

    attachment: float
    limit: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.attachment) and self.attachment >= 0):
            raise ParameterError("attachment", f"must be finite and >= 0, got {self.attachment}")
        if self.limit is not None and not (math.isfinite(self.limit) and self.limit > 0):
            raise ParameterError("limit", f"must be finite and > 0 (or null), got {self.limit}")


@dataclass(frozen=True, kw_only=True)
class Interval:
    value: float
    ci_low: float
    ci_high: float
    std_error: float | None = None


@dataclass(frozen=True, kw_only=True)
class Contribution:
    """A line's Euler allocation of TVaR, E[S_i | S > VaR], scaled so the lines sum to TVaR."""

    label: str
    tvar_contribution: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True, kw_only=True)
class MeasureEstimate:
    level: float
    var: Interval
    tvar: Interval
    diagnostics: Diagnostics
    contributions: list[Contribution] = field(default_factory=list)


@dataclass(frozen=True, kw_only=True)
class LayerEstimate:
    attachment: float
    limit: float | None
    expected_loss: Interval
    probability_attach: Interval
    probability_exhaust: Interval | None
    diagnostics: Diagnostics


@dataclass(frozen=True, kw_only=True)
class TailResult:
    method: str
    method_reason: str
    seed: int
    elapsed_s: float
    stopped_by: str
    samples: int
    mean: float
    std_dev: float
    measures: list[MeasureEstimate] = field(default_factory=list)
    layers: list[LayerEstimate] = field(default_factory=list)
    loss_exceedance: list[Interval] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def check_levels(levels: Sequence[float]) -> np.ndarray:
    q = np.asarray(levels, dtype=float)
    if q.ndim != 1 or q.size == 0:
        raise ParameterError("levels", "must be a non-empty list of numbers")
    for i, v in enumerate(q):
        if not (0.0 < v < 1.0):
            raise ParameterError(f"levels.{i}", f"must be strictly between 0 and 1, got {v}")
    return q


def _negative_claims(portfolio: Portfolio) -> int | None:
    """The first line whose paid claims can be negative (a normal severity without a
    retention), or None."""
    for k, line in enumerate(portfolio.lines):
        if line.paid_severity.support_min < 0.0:
            return k
    return None


def _refuse_negative_var(portfolio: Portfolio, levels: list[int]) -> None:
    """VaR is searched on a grid of positive losses: a level whose VaR the pilot finds at or
    below 0 (possible only when claims can be negative) is refused with the fix, rather than
    answered with the grid's edge."""
    k = _negative_claims(portfolio)
    if levels and k is not None:
        raise MethodError(
            f"levels.{levels[0]}",
            f"the value-at-risk at this level is not positive (line {k} can pay negative "
            "claims), and risk measures are computed for positive losses only; give that line "
            "a retention (each claim then pays max(X - retention, 0)), or use exceedance "
            "probabilities, which take any threshold",
        )


def guess_var(portfolio: Portfolio, q: float) -> float:
    """A rough VaR for placing the pilot grid: the larger of a normal approximation and the
    single-loss approximation (Boecker and Klueppelberg 2005) of the heaviest line."""
    guess = portfolio.mean + float(stats.norm.isf(1.0 - q)) * portfolio.std_dev
    for line in portfolio.lines:
        lam = line.paid_count.mean
        if lam > 0 and line.paid_severity.tail == "heavy":
            p = min((1.0 - q) / lam, 0.5)
            guess = max(guess, float(line.paid_severity.isf(p)) + portfolio.mean)
    return float(guess) if math.isfinite(guess) else float(portfolio.mean * 10)


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


def _var_error(q: np.ndarray, a: np.ndarray) -> object:
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


def _anchor_span(portfolio: Portfolio, q: np.ndarray) -> tuple[float, float]:
    """The range the pilot grid must span: every rough VaR candidate (normal approximation,
    single-loss approximation with and without the mean). Far in a heavy tail they differ by
    many orders of magnitude (Poisson(5) lognormal(0, 10) at 0.999: the normal guess is 2e44,
    the VaR 2.4e15), so the grid spans them all, log-spaced."""
    points = [guess_var(portfolio, float(level)) for level in q]
    for line in portfolio.lines:
        lam = line.paid_count.mean
        if lam > 0:
            for level in q:
                p = min((1.0 - float(level)) / lam, 0.5)
                points.append(float(line.paid_severity.isf(p)))
    finite = [x for x in points if math.isfinite(x) and x > 0]
    if not finite:
        finite = [max(abs(portfolio.mean), 1.0)]
    return max(min(finite) / 20.0, 1e-9), max(finite) * 20.0


def _pilot_grid(lo: float, hi: float) -> np.ndarray:
    # at least 160 points, and at least 8 a decade so that inversion stays fine
    decades = math.log10(hi / lo)
    return np.geomspace(lo, hi, max(160, int(8 * decades) + 1))


_PILOT_WIDENINGS = 4  # each widens the pilot grid by 1e3 on the side where the VaR was missed


def _pilot_vars(name: str, portfolio: Portfolio, q: np.ndarray, seed: int) -> list[float]:
    vars_, below = _pilot_search(name, portfolio, q, seed)
    _refuse_negative_var(portfolio, below)
    return vars_


def _pilot_search(name: str, portfolio: Portfolio, q: np.ndarray, seed: int
                  ) -> tuple[list[float], list[int]]:
    """Pilot VaRs on a log grid that follows the tail: widened (by 1e3 a side, at most four
    times) until every level's VaR is bracketed; a level still unbracketed keeps its guess
    (its final figure is then flagged by the main run's own bracketing check)."""
    guesses = [guess_var(portfolio, float(level)) for level in q]
    lo, hi = _anchor_span(portfolio, q)
    out: list[float | None] = [None] * q.size
    for widening in range(_PILOT_WIDENINGS + 1):
        a = _pilot_grid(lo, hi)
        if portfolio.dependence is not None:
            values = _dependent_values(name, portfolio, a, guesses, seed,
                                       euler=np.zeros(0, np.int64))
        else:
            values = sampler("conditional" if name == "conditional_is" else name, portfolio,
                             a, guesses, seed)
        stats_ = ContributionStats.from_samples(
            values(PILOT_SAMPLES, block_rng(seed, PILOT, _STREAM, widening)))
        curves = _Curves(a, stats_)
        low_side: list[int] = []
        above = False
        for i, level in enumerate(q):
            v = curves.var(float(level))[0]
            out[i] = v
            if v is None:
                # P(S > a) above 1 - q everywhere: the VaR is past the top; else below
                if curves.p[-1] >= 1.0 - float(level):
                    above = True
                else:
                    low_side.append(i)
        if not (low_side or above) or lo <= 1e-12 and not above:
            break
        lo, hi = (lo / 1e3 if low_side else lo), (hi * 1e3 if above else hi)
        lo = max(lo, 1e-12)
    return [v if v is not None else g for v, g in zip(out, guesses, strict=True)], low_side


def tail_estimates(
    portfolio: Portfolio | CreditModel, *, levels: Sequence[float] = (),
    layers: Sequence[Layer] = (), losses: Sequence[float] = (), method: str = "auto",
    precision: Precision | None = None, seed: int | None = None,
) -> TailResult:
    """VaR and TVaR at `levels`, `layers` losses and P(S > loss) for `losses`, from one
    sample set. With `auto`, a result with a figure flagged unreliable is redone with the
    next candidate (at most one per estimator family), and the first fully reliable one is
    kept; when none is, the first is returned with its flags."""
    from core.credit.model import CreditModel

    if isinstance(portfolio, CreditModel):
        from core.credit.measures import credit_tail

        return credit_tail(portfolio, levels=levels, layers=layers, losses=losses,
                           method=method, precision=precision, seed=seed)
    start = time.monotonic()
    seed = check_seed(seed)
    precision = precision or Precision()
    q = check_levels(levels) if len(levels) else np.zeros(0)
    if method == "recursion" and portfolio.dependence is not None:
        raise MethodError("method", "recursion does not apply to a dependent portfolio "
                                    "(portfolio.dependence): no rigorous bounds for a "
                                    "copula-coupled sum are implemented; use auto")
    if method == "recursion":
        from core.recursion_measures import tail_bounds

        return tail_bounds(portfolio, levels=list(q), layers=layers, losses=losses, seed=seed)
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
    measures = [_measure(curves, float(level), portfolio) for level in q]
    if portfolio.dependence is not None:
        from core.dependence.allocation import with_contributions

        idx = euler_points(portfolio, g=a.size)
        tail_cols = idx.size * len(portfolio.lines)
        g = a.size
        mean = np.asarray(curves.stats.mean(), dtype=float)
        se = np.asarray(curves.stats.std_error(), dtype=float)
        bounds = (mean[-2 * g:-g] - Z95 * se[-2 * g:-g], mean[-g:] + Z95 * se[-g:])
        e_mean = mean[-(tail_cols + 2 * g):-2 * g]
        e_se = se[-(tail_cols + 2 * g):-2 * g]
        measures = [with_contributions(_grid_widened(ms, a, bounds), a[idx], e_mean, e_se,
                                       portfolio) for ms in measures]
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


def _grid_widened(ms: MeasureEstimate, a: np.ndarray,
                  bounds: tuple[np.ndarray, np.ndarray]) -> MeasureEstimate:
    """The VaR interval widened to the lattice's lower law's lower band and upper law's upper
    band (their crossings of 1 - q), so the grid error of the line quantiles is inside it."""
    from dataclasses import replace

    p = 1.0 - ms.level
    low = _invert(a, np.maximum(bounds[0], 0.0), p)
    high = _invert(a, bounds[1], p)
    var = ms.var
    new = Interval(value=var.value,
                   ci_low=min(var.ci_low, low if low is not None else float(a[0])),
                   ci_high=max(var.ci_high, high if high is not None else float(a[-1])),
                   std_error=var.std_error)
    return replace(ms, var=new)


def euler_points(portfolio: Portfolio, *, g: int) -> np.ndarray:
    """Grid points where the Euler terms E[S_i 1{S > a}] are kept (all for a few lines, every
    fourth for more, so the columns stay bounded)."""
    step = 1 if len(portfolio.lines) <= 4 else 4
    return np.arange(0, g, step, dtype=np.int64)


def _dependent_values(name: str, portfolio: Portfolio, points: np.ndarray,
                      anchors: Sequence[float], seed: int, *, euler: np.ndarray):
    """[exceedance | stop-loss | Euler terms] of a dependent portfolio's estimator."""
    from core.dependence import engine

    n_pts = points.size
    fn = engine.values(name, portfolio, points, anchors, euler, seed,
                       smallest_tail=1e-9)
    width = 2 * n_pts + euler.size * len(portfolio.lines)

    def block(m: int, rng: np.random.Generator) -> np.ndarray:
        # ... then the lower and upper laws' exceedance at the grid points (GRID of them),
        # which bound the lattice's grid error of VaR.
        v = fn(m, rng)
        g = min(GRID, n_pts)
        return np.hstack([v[:, :width], v[:, width:width + g],
                          v[:, width + n_pts:width + n_pts + g]])

    return block


def _choose(portfolio: Portfolio, q: np.ndarray, extra: list[float], method: str,
            seed: int) -> tuple[list[str], str]:
    """Candidate names, best first, and the reason in words."""
    if method != "auto":
        return [method], f"{method} requested"
    points = [guess_var(portfolio, float(level)) for level in q] + [x for x in extra if x > 0]
    # The pilot compares estimators at the extreme points only: it costs a pilot per point.
    probe = sorted(points)[:: max(1, len(points) - 1)] if points else [portfolio.mean]
    if portfolio.dependence is not None:
        from core.dependence.exceed import choose

        return choose(portfolio, np.asarray(probe), seed, measures=True)
    trials, reason = select.choose(portfolio, np.asarray(probe), seed)
    return [t.name for t in trials], reason


def _run(name, portfolio, a, q, layers, losses, anchors, precision, seed, start):
    """Main run: the grid's exceedance and stop-loss columns, then per layer its loss,
    attachment and exhaustion columns, then P(S > loss) per loss."""
    n_layers = len(layers)
    extra = point_columns(layers, losses)
    points = np.concatenate([a, np.asarray(extra, dtype=float)])
    if portfolio.dependence is not None:
        values = _dependent_values(name, portfolio, points, anchors, seed,
                                   euler=euler_points(portfolio, g=a.size))
    else:
        values = sampler(name, portfolio, points, anchors, seed)
    g, e = a.size, len(extra)
    block = layout_block(values, g, layers, losses)

    group = Group((0,), block, work_per_sample(portfolio.expected_claims, 2 * (g + e)), name)
    deadline = None if precision.time_limit_s is None else start + precision.time_limit_s
    error_of = _var_error(q, a) if q.size else _layer_error(g, n_layers)
    run = run_group(group, block_size(portfolio), precision, seed,
                    _STREAM + select.METHOD_STREAM[name], deadline, error_of=error_of)
    return _Curves(a, run.stats), run


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
        return np.maximum(np.hstack(cols), 0.0)

    return block


def _layer_error(g: int, n_layers: int):
    def error_of(stats_: ContributionStats) -> float:
        mean = np.asarray(stats_.mean(), dtype=float)[2 * g:]
        se = np.asarray(stats_.std_error(), dtype=float)[2 * g:]
        with np.errstate(divide="ignore", invalid="ignore"):
            re = np.where(mean > 0, se / mean, np.inf)
        return float(np.max(re)) if re.size else 0.0

    return error_of


def _measure(curves: _Curves, q: float, portfolio: object = None) -> MeasureEstimate:
    v, lo, hi = curves.var(q)
    a = curves.a
    g = int(np.clip(np.searchsorted(a, v if v is not None else a[0]), 0, a.size - 1))
    diag = curves.diagnostics[g]
    if v is None:
        nan_safe = float(a[-1])
        var = Interval(value=nan_safe, ci_low=float(a[0]), ci_high=nan_safe)
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
    """value +- 1.96 se; with nothing observed, a one-sided 95% bound of -ln(0.05)/n times
    the largest possible value (1 for a probability, the limit for a layer), never 0 +- 0."""
    if value <= 0.0 and se <= 0.0:
        return Interval(value=0.0, ci_low=0.0, ci_high=cap * -math.log(0.05) / n,
                        std_error=None)
    return Interval(value=value, ci_low=max(0.0, value - Z95 * se),
                    ci_high=min(value + Z95 * se, cap), std_error=se)


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


@dataclass(frozen=True, kw_only=True)
class CurvePoint:
    """A point of the exceedance curve: the loss with the given return period (years), or
    the return period of the given loss."""

    return_period: float
    loss: float
    loss_ci_low: float
    loss_ci_high: float
    probability: float


def exceedance_curve(
    portfolio: Portfolio, *, return_periods: Sequence[float] = (), losses: Sequence[float] = (),
    method: str = "auto", precision: Precision | None = None, seed: int | None = None,
) -> tuple[list[CurvePoint], list[CurvePoint], TailResult]:
    """Losses at return periods T (the VaR at level 1 - 1/T) and return periods 1/P(S > loss)
    of given losses, from one sample set."""
    for i, t in enumerate(return_periods):
        if not (math.isfinite(t) and t > 1.0):
            raise ParameterError(f"return_periods.{i}", f"must be a number of years > 1, got {t}")
    levels = [1.0 - 1.0 / t for t in return_periods]
    res = tail_estimates(portfolio, levels=levels, losses=losses, method=method,
                         precision=precision, seed=seed)
    by_period = [CurvePoint(return_period=t, loss=m.var.value, loss_ci_low=m.var.ci_low,
                            loss_ci_high=m.var.ci_high, probability=1.0 / t)
                 for t, m in zip(return_periods, res.measures, strict=True)]
    by_loss = [CurvePoint(return_period=(1.0 / p.value) if p.value > 0 else math.inf,
                          loss=x, loss_ci_low=x, loss_ci_high=x, probability=p.value)
               for x, p in zip(losses, res.loss_exceedance, strict=True)]
    return by_period, by_loss, res
