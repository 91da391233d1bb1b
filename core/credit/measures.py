"""VaR, TVaR with per-group Euler contributions, tranche (layer) losses and P(L > loss) for a
credit portfolio: the credit branch of core.measures.tail_estimates.

The grid machinery is core.measures' (exceedance and stop loss on a grid around the pilot's
VaR figures, VaR by inverting the pointwise band, TVaR = VaR + E[(L - VaR)+] / (1 - q)); the
samples come from a Glasserman-Li mixture with one component at each anchor.

Euler contributions: a second run at each level's VaR v estimates A_g = E[L_g 1{L > v}]
(L_g group g's loss) and S = sum_g A_g = E[L 1{L > v}]; group g gets TVaR * A_g / S. For a
loss with no atom at v this is E[L_g | L > VaR], the Euler allocation of TVaR (Tasche 1999);
with atoms (fixed LGDs and equal exposures put L on a lattice) the mass at the boundary is
split in the same proportions. The parts sum to the TVaR by construction. Their interval is
the delta-method one for the ratio A_g / S (the covariance from var(A_g + S), a non-negative
column), widened by the TVaR's own relative error.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence

import numpy as np
from scipy import stats

from core import spans
from core.credit.draws import Component, Sampler
from core.credit.estimators import (
    CREDIT,
    DEFENSIVE,
    block_size,
    component,
    estimator,
    line_components,
    work,
)
from core.credit.exceedance import check_method, choose
from core.credit.model import CreditModel
from core.credit.moments import loss_moments
from core.curves import (
    PILOT_SAMPLES,
    _Curves,
    _grid,
    _interp_log,
    _layer_error,
    _layers,
    _losses,
    _measure,
    _var_error,
    lattice_widened,
    layout_block,
    point_columns,
)
from core.estimators import registry
from core.estimators.base import BlockFn, Group
from core.exceedance import check_seed
from core.functionals import spread_out
from core.intervals import Z95
from core.invariants import check_tail
from core.levels import Layer, check_levels
from core.precision import GroupRun, Precision, run_group
from core.results import Contribution, Interval, MeasureEstimate, TailResult
from core.streams import Purpose, Stream


def _stream(purpose: Purpose, name: str) -> Stream:
    """The method's random stream for this purpose (its registry entry names it)."""
    return Stream(purpose, estimator(name).stream_for(CREDIT))


def guess_var(model: CreditModel, q: float) -> float:
    """A rough VaR for placing the pilot grid: the conditional mean loss with the factors at
    their (1 - q) quantile along the direction that raises the loss fastest (and, for the
    t copula, W at its (1 - q) quantile)."""
    weights = model.counts * model.exposures * model.pds
    d = -(weights[:, None] * model.loadings_x).sum(axis=0)
    norm = float(np.linalg.norm(d))
    z = float(stats.norm.isf(1.0 - q))
    x = (z * d / norm if norm > 0 else d)[None, :]
    c = model.thresholds
    if model.copula == "student_t":
        nu = float(model.df or 1.0)
        c = c * math.sqrt(float(stats.chi2.ppf(1.0 - q, nu)) / nu)
    p = stats.norm.cdf((c[None, :] - x @ model.loadings_x.T) / model.residual_sd[None, :])[0]
    mu = np.array([float(lg.mean) for lg in model.lgds])
    credit = float(max((model.counts * model.exposures * mu * p).sum(), model.credit_mean))
    # Claim lines: each at its own quantile of the level (a comonotone guess; only the
    # pilot grid's placement depends on it).
    lines = model.line_set
    if lines is None:
        return credit
    ubar = np.array([1.0 - q])
    return credit + sum(float(lq.bounds(ubar)[0][0]) for lq in lines.quantiles)


def _values(sampler: Sampler, points: np.ndarray, grid: int = 0) -> BlockFn:
    """[exceedance | stop loss] at the points; with claim lines and grid > 0 then the
    exceedance of the lower and upper lattice losses at the first `grid` points (the bounds
    of the lines' grid error, kept last by layout_block)."""
    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        d = sampler.draw(m, rng)
        lr = np.exp(d.log_lr)[:, None]
        over = d.total[:, None] - points[None, :]
        cols = [(over > 0) * lr, np.maximum(over, 0.0) * lr]
        if grid and d.total_lo is not None and d.total_hi is not None:
            a = points[None, :grid]
            cols += [(d.total_lo[:, None] > a) * lr, (d.total_hi[:, None] > a) * lr]
        return np.hstack(cols)

    return values


def _sampler(model: CreditModel, name: str, anchors: Sequence[float]) -> Sampler:
    if not estimator(name).proposal:
        return Sampler(model, [], 1.0)
    top = model.max_loss
    comps: list[Component] = []
    for x in spread_out(anchors):
        if 0 < x < top:
            comps += [component(model, float(x)), *line_components(model, float(x))]
    return Sampler(model, comps, DEFENSIVE)


def _pilot_vars(model: CreditModel, name: str, q: np.ndarray, seed: int) -> list[float]:
    guesses = [guess_var(model, float(level)) for level in q]
    top = model.max_loss
    a = np.geomspace(max(min(guesses) / 20.0, 1e-9), min(max(guesses) * 20.0, top), 160)
    anchors = [min(g, 0.999 * top) for g in guesses]
    sampler = _sampler(model, name, anchors)
    group = Group((0,), _values(sampler, a), work(model, name, len(spread_out(anchors))))
    stats_ = spans.draw(group, _stream(Purpose.MEASURE_PILOT, name), seed, [(0, PILOT_SAMPLES)])
    curves = _Curves(a, stats_)
    out = []
    for level, guess in zip(q, guesses, strict=True):
        v = curves.var(float(level))[0]
        out.append(v if v is not None else guess)
    return out


def credit_tail(
    model: CreditModel, *, levels: Sequence[float] = (), layers: Sequence[Layer] = (),
    losses: Sequence[float] = (), method: str = "auto", precision: Precision | None = None,
    seed: int | None = None,
) -> TailResult:
    start = time.monotonic()
    seed = check_seed(seed)
    precision = precision or Precision()
    method = check_method(method)
    q = check_levels(levels) if len(levels) else np.zeros(0)
    extra = [x for x in point_columns(layers, losses) if x > 0]
    if method == registry.AUTO:
        probe = [guess_var(model, float(v)) for v in q] + extra
        names, reason = choose(model, np.asarray(probe or [model.mean]), seed)
        name = names[0]
    else:
        name, reason = method, f"{method} requested"
    anchors = _pilot_vars(model, name, q, seed) if q.size else []
    anchors += [x for x in extra if x < model.max_loss]
    anchors = anchors or [model.mean]
    spread, warnings = 0.05, []
    for attempt in range(3):
        a = _grid(anchors, spread)
        curves, run = _run(model, name, a, q, layers, losses, anchors, precision, seed, start)
        missing = [float(level) for level in q if None in curves.var(float(level))]
        if not missing:
            break
        spread *= 4.0
        if attempt == 2:
            warnings.append(f"VaR interval at levels {missing} runs past the estimation grid; "
                            "increase samples")
    measures = [_snap(model, curves, _measure(curves, float(level))) for level in q]
    if model.lines:
        measures = [lattice_widened(curves, ms) for ms in measures]
    if measures:
        measures = _with_contributions(model, name, measures, anchors, precision, seed, start)
    if run.stopped_by == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    for m in measures:
        if not m.diagnostics.reliable:
            warnings.append(f"level {m.level:g}: flagged unreliable: {m.diagnostics.reason}")
    layer_out = _layers(curves, a, layers)
    measures, layer_out, notes = check_tail(measures, layer_out)
    warnings += notes
    for ly in layer_out:
        if not ly.diagnostics.reliable:
            warnings.append(f"layer {ly.attachment:g} xs: flagged unreliable: "
                            f"{ly.diagnostics.reason}")
    mean, sd = loss_moments(model)
    return TailResult(
        method=name, method_reason=reason, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by=run.stopped_by, samples=run.samples, mean=mean, std_dev=sd,
        measures=measures, layers=layer_out, loss_exceedance=_losses(curves, len(layers), losses),
        warnings=warnings)


def _run(model: CreditModel, name: str, a: np.ndarray, q: np.ndarray,
         layers: Sequence[Layer], losses: Sequence[float], anchors: Sequence[float],
         precision: Precision, seed: int, start: float) -> tuple[_Curves, GroupRun]:
    extra = point_columns(layers, losses)
    points = np.concatenate([a, np.asarray(extra, dtype=float)])
    block = layout_block(_values(_sampler(model, name, anchors), points,
                                 a.size if model.lines else 0), a.size, layers, losses)
    group = Group((0,), block, work(model, name, len(spread_out(anchors))), name)
    deadline = precision.deadline(start)
    error_of = _var_error(q, a) if q.size else _layer_error(a.size)
    run = run_group(group, block_size(model), precision, seed,
                    _stream(Purpose.MEASURE_SAMPLES, name), deadline, error_of=error_of)
    return _Curves(a, run.stats), run


def _snap_point(a: np.ndarray, x: float, h: float) -> float:
    """The lattice point inside the grid cell (a_g, a_g+1] holding x, where the step-shaped
    exceedance curve actually drops; x itself when the cell holds none or several."""
    g = int(np.searchsorted(a, x)) - 1
    if g < 0 or g + 1 >= a.size or a[g + 1] - a[g] > h:
        return x
    k = h * (math.floor(a[g] / h + 1e-9) + 1.0)
    return k if k <= a[g + 1] * (1 + 1e-12) else x


def _snap(model: CreditModel, curves: _Curves, m: MeasureEstimate) -> MeasureEstimate:
    """On a lattice loss (fixed LGDs with a common unit h) P(L > a) is a step function and
    the VaR a lattice point; interpolating between grid points would put the VaR and its
    interval ends just past the jump, so they are moved onto it, and the TVaR recomputed
    there (VaR + E[(L - VaR)+] / (1 - q))."""
    h = model.lattice_unit
    if h is None or m.var.value <= 0:
        return m
    a = curves.a
    v = _snap_point(a, m.var.value, h)
    lo, hi = _snap_point(a, m.var.ci_low, h), _snap_point(a, m.var.ci_high, h)
    tail = 1.0 - m.level
    sl = _interp_log(a, curves.sl, v)
    sl_se = float(np.interp(v, a, curves.sl_se))
    tvar = v + sl / tail
    half = Z95 * sl_se / tail
    return MeasureEstimate(
        level=m.level, var=Interval(value=v, ci_low=min(lo, v), ci_high=max(hi, v)),
        tvar=Interval(value=tvar, ci_low=max(v, tvar - half), ci_high=tvar + half,
                      std_error=sl_se / tail),
        diagnostics=m.diagnostics)


def _with_contributions(model: CreditModel, name: str, measures: list[MeasureEstimate],
                        anchors: Sequence[float], precision: Precision, seed: int,
                        start: float) -> list[MeasureEstimate]:
    """One more run (the main run's proposal) for every level's A_g and S at its VaR."""
    vs = np.array([m.var.value for m in measures])
    use = (vs > 0) & (vs < model.max_loss)
    if not use.any():
        return measures
    sampler = _sampler(model, name, anchors)
    gs, nv = len(model.labels), int(use.sum())
    at = vs[use]

    def block(n: int, rng: np.random.Generator) -> np.ndarray:
        d = sampler.draw(n, rng)
        cols = []
        for v in at:
            w = (np.exp(d.log_lr) * (d.total > v))[:, None]
            a = d.group_loss * w
            s = a.sum(axis=1, keepdims=True)
            cols += [a, s, a + s]
        return np.hstack(cols)

    group = Group((0,), block, work(model, name, len(spread_out(anchors))), "Euler")
    fixed = Precision(samples=precision.samples or precision.minimum,
                      time_limit_s=precision.time_limit_s)
    deadline = precision.deadline(start)
    run = run_group(group, block_size(model), fixed, seed, _stream(Purpose.EULER, name),
                    deadline)
    mean = np.asarray(run.stats.mean(), dtype=float).reshape(nv, 2 * gs + 1)
    var = (np.asarray(run.stats.std_error(), dtype=float) ** 2 * run.stats.n).reshape(
        nv, 2 * gs + 1)
    out, j = [], 0
    for m, used in zip(measures, use, strict=True):
        if used:
            m = _contributions(model, m, mean[j], var[j], run.stats.n)
            j += 1
        out.append(m)
    return out


def _contributions(model: CreditModel, m: MeasureEstimate, mean: np.ndarray,
                   var: np.ndarray, n: int) -> MeasureEstimate:
    labels = model.labels
    gs = len(labels)
    a, s = mean[:gs], float(mean[gs])
    if s <= 0:
        return m
    var_a, var_s, var_sum = var[:gs], float(var[gs]), var[gs + 1:]
    cov = 0.5 * (var_sum - var_a - var_s)  # cov(A_g, S) from var(A_g + S)
    r = a / s
    var_r = np.maximum(var_a - 2 * r * cov + r * r * var_s, 0.0) / (s * s) / n
    tvar = m.tvar.value
    rel_t = (m.tvar.std_error or 0.0) / tvar if tvar > 0 else 0.0
    parts = []
    for g, label in enumerate(labels):
        c = tvar * float(r[g])
        rel = math.sqrt(float(var_r[g]) / float(r[g]) ** 2 + rel_t**2) if r[g] > 0 else 0.0
        half = Z95 * c * rel
        parts.append(Contribution(label=label, tvar_contribution=c,
                                  ci_low=max(0.0, c - half), ci_high=c + half))
    return MeasureEstimate(level=m.level, var=m.var, tvar=m.tvar, diagnostics=m.diagnostics,
                           contributions=parts)
