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

import dataclasses
import math
import time
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from core import degenerate, spans
from core.curves import (
    GRID,
    PILOT_SAMPLES,
    _Curves,
    _grid,
    _layer_error,
    _layers,
    _losses,
    _measure,
    _var_error,
    lattice_widened,
    layout_block,
    point_columns,
)
from core.errors import MethodError
from core.estimators import registry, select
from core.estimators.base import BlockFn, Group, work_per_sample
from core.exceedance import check_seed
from core.invariants import check_tail
from core.levels import Layer, check_levels, guess_var, largest_claim_var
from core.portfolio import Portfolio
from core.precision import GroupRun, Precision, past, run_group
from core.results import (
    Contribution,
    Interval,
    LayerEstimate,
    MeasureEstimate,
    TailResult,
)
from core.sampling import block_size
from core.streams import Purpose, Stream

if TYPE_CHECKING:
    from core.credit.model import CreditModel

# Layer and the result records live in core.levels and core.results; named here for callers.
__all__ = [
    "Contribution",
    "Interval",
    "Layer",
    "LayerEstimate",
    "MeasureEstimate",
    "TailResult",
    "tail_estimates",
]

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


def _refuse_negative_layers(portfolio: Portfolio, layers: Sequence[Layer]) -> None:
    """An aggregate layer of a sum that can be negative rests on P(S > attachment) far above
    the bulk of S, which no estimator here reaches (Poisson(5) normal(-10, 1), layer 10 xs 0:
    a tilt to 0 draws almost no claims and answered 7e-61 against 3e-25), so it is refused
    at the layer with the same fix as a negative VaR."""
    k = _negative_claims(portfolio)
    if layers and k is not None:
        raise MethodError(
            "layers.0",
            f"aggregate layers are computed for positive losses only, and line {k} can pay "
            "negative claims; give that line a retention (each claim then pays "
            "max(X - retention, 0)), or use exceedance probabilities, which take any threshold",
        )


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


def _pilot_vars(name: str, portfolio: Portfolio, q: np.ndarray, seed: int,
                deadline: float | None = None) -> list[float]:
    vars_, below = _pilot_search(name, portfolio, q, seed, deadline)
    _refuse_negative_var(portfolio, below)
    return vars_


def _pilot_search(name: str, portfolio: Portfolio, q: np.ndarray, seed: int,
                  deadline: float | None = None) -> tuple[list[float], list[int]]:
    """Pilot VaRs on a log grid that follows the tail: widened (by 1e3 a side, at most four
    times, none past the deadline) until every level's VaR is bracketed; a level still
    unbracketed keeps its guess (its final figure is then flagged by the main run's own
    bracketing check)."""
    guesses = [guess_var(portfolio, float(level)) for level in q]
    lo, hi = _anchor_span(portfolio, q)
    out: list[float | None] = [None] * q.size
    low_side: list[int] = []
    for widening in range(_PILOT_WIDENINGS + 1):
        a = _pilot_grid(lo, hi)
        if portfolio.dependence is not None:
            values = _dependent_values(name, portfolio, a, guesses, seed,
                                       euler=np.zeros(0, np.int64))
            stream_name = name
        else:
            pilot = registry.get(registry.get(name).grid_pilot or name)
            values = pilot.contributions(portfolio, a, guesses, seed, deadline=deadline)
            stream_name = pilot.stream
        # Block `widening` of the pilot stream, drawn where the estimate's spans run.
        group = Group((0,), values, work_per_sample(portfolio.expected_claims, 2 * a.size))
        stats_ = spans.draw(group, Stream(Purpose.MEASURE_PILOT, stream_name), seed,
                            [(widening, PILOT_SAMPLES)])
        curves = _Curves(a, stats_)
        low_side = []
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
        if not (low_side or above) or (lo <= 1e-12 and not above) or past(deadline):
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
    _refuse_negative_layers(portfolio, layers)
    if degenerate.surely_zero(portfolio):
        return degenerate.tail(q, layers, losses, seed, start)
    p0 = degenerate.no_loss_probability(portfolio)
    if p0 is not None and q.size and np.any(q <= p0):
        return _with_atom_levels(portfolio, q, q <= p0, layers=layers, losses=losses,
                                 method=method, precision=precision, seed=seed)
    only_crude = _bounded_figures_of_infinite_mean(portfolio, q, layers, method)
    if only_crude:
        method = registry.model_itself()
    if (method != registry.AUTO and method in registry.names()
            and registry.get(method).deterministic):
        if portfolio.dependence is not None:
            raise MethodError("method", f"{method} does not apply to a dependent portfolio "
                                        "(portfolio.dependence): no rigorous bounds for a "
                                        "copula-coupled sum are implemented; use auto")
        return registry.get(method).tail_bounds(portfolio, levels=list(q), layers=layers,
                                                losses=losses, seed=seed)
    deadline = precision.deadline(start)
    names, reason = _choose(portfolio, q, _extra_points(layers, losses), method, seed,
                            deadline)
    if only_crude:
        reason = ("automatic choice: a line has an infinite mean claim; only crude estimates "
                  "limited layers and loss probabilities of such a portfolio")
    first: TailResult | None = None
    for name in names:
        result = _estimate(name, portfolio, q, layers, losses, precision, seed, start, reason)
        if first is None:
            first = result
        if _all_reliable(result) or past(deadline):
            if result is not first and _all_reliable(result):
                result.warnings.insert(0, f"{first.method} was flagged unreliable; "
                                          f"re-estimated with {name}")
            return result
    assert first is not None
    return first


def _with_atom_levels(portfolio: Portfolio, q: np.ndarray, at_zero: np.ndarray, *,
                      layers: Sequence[Layer], losses: Sequence[float], method: str,
                      precision: Precision, seed: int) -> TailResult:
    """The levels at or below P(S = 0) answered exactly (VaR 0), the others estimated: a
    grid of positive losses cannot hold a VaR of 0, and its edge is no answer."""
    rest = tail_estimates(portfolio, levels=q[~at_zero].tolist(), layers=layers,
                          losses=losses, method=method, precision=precision, seed=seed)
    sampled = iter(rest.measures)
    measures = [degenerate.below_the_atom(float(level), portfolio.mean) if zero
                else next(sampled) for level, zero in zip(q, at_zero, strict=True)]
    return dataclasses.replace(rest, measures=measures)


def _bounded_figures_of_infinite_mean(portfolio: Portfolio, q: np.ndarray,
                                      layers: Sequence[Layer], method: str) -> bool:
    """Whether auto must use crude: limited layers and loss probabilities exist whatever the
    mean, but the other estimators build a layer from two stop-loss transforms, which are
    infinite when a line's mean claim is. An explicit other method is refused at `method`;
    TVaR and unlimited layers are left to the estimators' own refusal (they do not exist)."""
    if math.isfinite(portfolio.mean) or q.size or any(ly.limit is None for ly in layers):
        return False
    if method not in (registry.AUTO, registry.model_itself()):
        raise MethodError(
            "method",
            f"{method} cannot estimate layers of a portfolio with an infinite mean claim (it "
            "differences two infinite stop-loss transforms); use crude or auto",
        )
    return method == registry.AUTO


def _extra_points(layers: Sequence[Layer], losses: Sequence[float]) -> list[float]:
    return [ly.attachment for ly in layers] + [
        ly.attachment + ly.limit for ly in layers if ly.limit is not None] + list(losses)


def _all_reliable(result: TailResult) -> bool:
    return all(m.diagnostics.reliable for m in result.measures) and all(
        ly.diagnostics.reliable for ly in result.layers)


def _estimate(name: str, portfolio: Portfolio, q: np.ndarray, layers: Sequence[Layer],
              losses: Sequence[float], precision: Precision, seed: int, start: float,
              reason: str) -> TailResult:
    deadline = precision.deadline(start)
    anchors = _pilot_vars(name, portfolio, q, seed, deadline) if q.size else []
    anchors += [x for x in _extra_points(layers, losses) if x > 0]
    anchors = anchors or [portfolio.mean]
    spread = 0.05
    warnings: list[str] = []
    for attempt in range(3):
        a = _grid(anchors, spread)
        curves, run = _run(name, portfolio, a, q, layers, losses, anchors, precision, seed,
                           start)
        missing = [float(level) for level in q if None in curves.var(float(level))]
        if not missing or run.stopped_by == "time_limit":
            break
        spread *= 4.0
        if attempt == 2:
            warnings.append(f"VaR interval at levels {missing} runs past the estimation grid; "
                            "increase samples")
    measures = [_measure(curves, float(level)) for level in q]
    if portfolio.dependence is not None:
        from core.dependence.allocation import with_contributions

        idx = euler_points(portfolio, g=a.size)
        tail_cols = idx.size * len(portfolio.lines)
        g = a.size
        mean = np.asarray(curves.stats.mean(), dtype=float)
        se = np.asarray(curves.stats.std_error(), dtype=float)
        e_mean = mean[-(tail_cols + 2 * g):-2 * g]
        e_se = se[-(tail_cols + 2 * g):-2 * g]
        measures = [with_contributions(lattice_widened(curves, ms), a[idx], e_mean, e_se,
                                       portfolio) for ms in measures]
        std_dev = _dependent_std_dev(portfolio)
    else:
        std_dev = portfolio.std_dev
    layer_out = _layers(curves, a, layers)
    loss_out = _losses(curves, len(layers), losses)
    floors = [largest_claim_var(portfolio, float(level)) for level in q]
    measures, layer_out, notes = check_tail(measures, layer_out, floors)
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
        std_dev=std_dev, measures=measures, layers=layer_out,
        loss_exceedance=loss_out, warnings=warnings,
    )


def _dependent_std_dev(portfolio: Portfolio) -> float:
    """sqrt(Var S) under the copula (the independent formula would ignore the correlation)."""
    from core.dependence.exceed import MEASURE_TAIL, dependent_moments
    from core.dependence.marginals import line_quantiles

    return dependent_moments(portfolio, line_quantiles(portfolio, MEASURE_TAIL))[1]


def euler_points(portfolio: Portfolio, *, g: int) -> np.ndarray:
    """Grid points where the Euler terms E[S_i 1{S > a}] are kept (all for a few lines, every
    fourth for more, so the columns stay bounded)."""
    step = 1 if len(portfolio.lines) <= 4 else 4
    return np.arange(0, g, step, dtype=np.int64)


def _dependent_values(name: str, portfolio: Portfolio, points: np.ndarray,
                      anchors: Sequence[float], seed: int, *, euler: np.ndarray) -> BlockFn:
    """[exceedance | stop-loss | Euler terms] of a dependent portfolio's estimator."""
    from core.dependence import engine
    from core.dependence.exceed import MEASURE_TAIL

    n_pts = points.size
    fn = engine.values(name, portfolio, points, anchors, euler, seed,
                       smallest_tail=MEASURE_TAIL)
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
            seed: int, deadline: float | None = None) -> tuple[list[str], str]:
    """Candidate names, best first, and the reason in words."""
    if method != registry.AUTO:
        if portfolio.dependence is not None:
            from core.dependence.engine import estimator_for

            estimator_for(method, portfolio)  # refused before any pilot when it does not serve
        return [method], f"{method} requested"
    points = [guess_var(portfolio, float(level)) for level in q] + [x for x in extra if x > 0]
    # The pilot compares estimators at the extreme points only: it costs a pilot per point.
    probe = sorted(points)[:: max(1, len(points) - 1)] if points else [portfolio.mean]
    if portfolio.dependence is not None:
        from core.dependence.exceed import choose

        return choose(portfolio, np.asarray(probe), seed, measures=True)
    trials, reason = select.choose(portfolio, np.asarray(probe), seed, deadline=deadline)
    return [t.name for t in trials], reason


def _run(name: str, portfolio: Portfolio, a: np.ndarray, q: np.ndarray, layers: Sequence[Layer],
         losses: Sequence[float], anchors: Sequence[float], precision: Precision, seed: int,
         start: float) -> tuple[_Curves, GroupRun]:
    """Main run: the grid's exceedance and stop-loss columns, then per layer its loss,
    attachment and exhaustion columns, then P(S > loss) per loss."""
    deadline = precision.deadline(start)
    extra = point_columns(layers, losses)
    points = np.concatenate([a, np.asarray(extra, dtype=float)])
    if portfolio.dependence is not None:
        values = _dependent_values(name, portfolio, points, anchors, seed,
                                   euler=euler_points(portfolio, g=a.size))
        from core.dependence.engine import DEPENDENT, estimator

        stream_name = estimator(name).stream_for(DEPENDENT)
    else:
        values = registry.get(name).contributions(portfolio, points, anchors, seed,
                                                  deadline=deadline)
        stream_name = registry.get(name).stream
    g, e = a.size, len(extra)
    block = layout_block(values, g, layers, losses)
    group = Group((0,), block, work_per_sample(portfolio.expected_claims, 2 * (g + e)), name)
    error_of = _var_error(q, a) if q.size else _layer_error(g)
    run = run_group(group, block_size(portfolio), precision, seed,
                    Stream(Purpose.MEASURE_SAMPLES, stream_name), deadline,
                    error_of=error_of)
    return _Curves(a, run.stats), run
