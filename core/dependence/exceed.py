"""P(S > x) for a dependent portfolio: the exceedance entry point's dependent branch.

Each threshold is its own sample set for the shifted methods (the shift is aimed at it) and
all thresholds share one for the others. With lattice quantiles the interval spans the lower
loss's lower 95% limit to the upper loss's upper 95% limit: the grid error widens the interval
and is never folded into the standard error. `auto` pilots every candidate (work-normalised
variance, then the reliability checks) as the independent engine does.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from core import spans
from core.dependence import engine
from core.dependence.amounts import lognormal_amounts
from core.dependence.marginals import LineQuantile, line_quantiles
from core.dependence.moments import dependent_std_dev
from core.diagnostics import ContributionStats
from core.errors import LimitError, MethodError, TailgaugeError
from core.estimators import registry
from core.estimators.base import Group
from core.exceedance_records import exceedance_result
from core.intervals import Z95
from core.invariants import check_probability
from core.portfolio import Portfolio
from core.precision import Precision, run_group
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from core.sampling import block_size
from core.streams import Purpose, Stream

FloatArray = npt.NDArray[np.float64]
PILOT_SAMPLES = 4096
MEASURE_TAIL = 1e-9  # the smallest tail a risk-measure request's lattices resolve
EXCEEDANCE_TAIL = 1e-12  # the same for an exceedance request


def _groups(name: str, portfolio: Portfolio, x: FloatArray, seed: int, *,
            measures: bool = False) -> list[Group]:
    # A method whose proposal aims at a point gets a sample set per threshold.
    shared = engine.estimator(name).one_sample_set
    parts = [list(range(x.size))] if shared else [[i] for i in range(x.size)]
    # A risk-measure request's pilot uses the lattices its main run builds (core.measures),
    # so they are built once.
    tail, top = (MEASURE_TAIL, None) if measures else (EXCEEDANCE_TAIL, top_of(x))
    out = []
    for idx in parts:
        pts = x[idx]
        fn = engine.values(name, portfolio, pts, list(pts), np.zeros(0, np.int64), seed,
                           smallest_tail=tail, top=top)
        g = pts.size

        def block(n: int, rng: np.random.Generator, fn: engine.Values = fn,
                  g: int = g) -> FloatArray:
            v = fn(n, rng)
            return np.hstack([v[:, :g], v[:, 2 * g:3 * g], v[:, 3 * g:4 * g]])

        out.append(Group(tuple(idx), block, _work(name, portfolio, g), name))
    return out


def top_of(x: FloatArray) -> float | None:
    """Only exceedance columns are used by an exceedance request: lattices need to reach just
    past the largest threshold (a line beyond it exceeds every threshold in both bounds)."""
    return 1.05 * float(np.max(x)) if float(np.min(x)) > 0 else None


def dependent_moments(portfolio: Portfolio, quantiles: list[LineQuantile]
                      ) -> tuple[float, float]:
    """(mean, standard deviation) of S: closed forms for lognormal amounts, else the line
    means and the quadrature of core.dependence.moments (NaN when it cannot vouch)."""
    amounts = lognormal_amounts(portfolio)
    if amounts is not None:
        return amounts.mean, math.sqrt(amounts.variance)
    return portfolio.mean, dependent_std_dev(portfolio, tuple(quantiles))


def _work(name: str, portfolio: Portfolio, points: int) -> float:
    m = len(portfolio.lines)
    if engine.estimator(name).amount_sampler is None:  # the copula's normals, then lookups
        return float(m + 4 * points)
    return float(12 * m * points)


def _mid_error(g: int) -> object:
    def error_of(stats: ContributionStats) -> float:
        mean = np.asarray(stats.mean(), dtype=float)[:g]
        se = np.asarray(stats.std_error(), dtype=float)[:g]
        with np.errstate(divide="ignore", invalid="ignore"):
            re = np.where(mean > 0, se / mean, np.inf)
        return float(np.max(re))

    return error_of


def _estimates(x: FloatArray, group: Group, stats: ContributionStats, samples: int,
               name: str) -> list[tuple[int, ExceedanceEstimate]]:
    g = len(group.indices)
    mean = np.asarray(stats.mean(), dtype=float)
    se = np.asarray(stats.std_error(), dtype=float)
    hits = np.asarray(stats.hits)
    diags = stats.diagnose()
    out = []
    for col, i in enumerate(group.indices):
        p, s = float(mean[col]), float(se[col])
        lo, hi = float(mean[g + col]), float(mean[2 * g + col])
        se_lo, se_hi = float(se[g + col]), float(se[2 * g + col])
        d: Diagnostics = diags[col]
        if int(hits[col]) == 0 or p <= 0:
            bound = -math.log(0.05) / samples
            out.append((i, ExceedanceEstimate(
                threshold=float(x[i]), value=0.0, std_error=None, relative_error=None,
                ci_low=0.0, ci_high=min(1.0, max(bound, hi + Z95 * se_hi)), samples=samples,
                hits=0, diagnostics=d, method=name)))
            continue
        low = max(0.0, min(p - Z95 * s, lo - Z95 * se_lo))
        high = min(1.0, max(p + Z95 * s, hi + Z95 * se_hi))
        out.append((i, ExceedanceEstimate(
            threshold=float(x[i]), value=p, std_error=s, relative_error=s / p,
            ci_low=min(low, p), ci_high=max(high, p), samples=samples,
            hits=int(hits[col]), diagnostics=d, method=name)))
    return out


def _pilot_cost(name: str, portfolio: Portfolio, x: FloatArray, seed: int, measures: bool
                ) -> tuple[float, bool]:
    cost, reliable = 0.0, True
    for k, group in enumerate(_groups(name, portfolio, x, seed, measures=measures)):
        stream = Stream(Purpose.PILOT, engine.estimator(name).stream_for(engine.DEPENDENT),
                        (k,))
        stats = spans.draw(group, stream, seed, [(0, PILOT_SAMPLES)])
        g = len(group.indices)
        mean = np.asarray(stats.mean(), dtype=float)[:g]
        se = np.asarray(stats.std_error(), dtype=float)[:g]
        rv = np.where(mean > 0, (se / np.where(mean > 0, mean, 1.0)) ** 2 * PILOT_SAMPLES,
                      math.inf)
        cost += float(np.max(rv)) * group.work
        reliable = reliable and all(d.reliable for d in stats.diagnose()[:g])
    return cost, reliable


def choose(portfolio: Portfolio, x: FloatArray, seed: int, *, measures: bool = False
           ) -> tuple[list[str], str]:
    trials: list[tuple[bool, float, str]] = []
    refused: list[TailgaugeError] = []
    for name in engine.candidates(portfolio, measures=measures):
        try:
            cost, ok = _pilot_cost(name, portfolio, x, seed, measures)
        except (MethodError, LimitError) as exc:
            refused.append(exc)
            continue
        trials.append((not ok, cost, name))
    if not trials:
        raise refused[0]
    trials.sort()
    best = trials[0]
    others = ", ".join(f"{n} {c / best[1]:.3g}x" if math.isfinite(c) and best[1] > 0
                       else f"{n} (no hits in pilot)" for _, c, n in trials[1:])
    kind = ("correlated lognormal amounts" if lognormal_amounts(portfolio) is not None
            else "copula-coupled lines")
    reason = (f"dependent portfolio ({kind}): pilot of {PILOT_SAMPLES} samples per candidate; "
              f"{best[2]} has the lowest work-normalised variance"
              + (f" (others relative: {others})" if others else ""))
    return [t[2] for t in trials], reason


def dependent_exceedance(portfolio: Portfolio, x: FloatArray, method: str,
                         precision: Precision, seed: int, start: float) -> ExceedanceResult:
    if method != registry.AUTO:
        # refused at `method` unless it serves this dependent portfolio
        engine.estimator_for(method, portfolio)
    deadline = precision.deadline(start)
    if method == registry.AUTO:
        names, reason = choose(portfolio, x, seed)
    else:
        names, reason = [method], f"{method} requested"
    found: dict[int, ExceedanceEstimate] = {}
    stops: list[str] = []
    for rank, name in enumerate(names[:2] if method == registry.AUTO else names):
        todo = [i for i in range(x.size) if i not in found or (
            not found[i].diagnostics.reliable and found[i].hits > 0)]
        if not todo:
            break
        for k, group in enumerate(_groups(name, portfolio, x, seed)):
            if not set(group.indices) & set(todo):
                continue
            run = run_group(group, block_size(portfolio), precision, seed,
                            Stream(Purpose.SAMPLES,
                                   engine.estimator(name).stream_for(engine.DEPENDENT), (k,)),
                            deadline,
                            error_of=_mid_error(len(group.indices)))  # type: ignore[arg-type]
            stops.append(run.stopped_by)
            for i, est in _estimates(x, group, run.stats, run.samples, name):
                # The invariants every figure passes (core.invariants), before auto's retry
                # decision, so that a violation is retried like any other flag.
                est = check_probability(est)[0]
                if i not in found or (rank > 0 and est.diagnostics.reliable):
                    if rank > 0:
                        reason += f"; threshold {x[i]:g} re-estimated by {name} after a flag"
                    found[i] = est
    mean, sd = dependent_moments(portfolio, line_quantiles(portfolio, EXCEEDANCE_TAIL,
                                                               top_of(x)))
    return exceedance_result([found[i] for i in range(x.size)], x.tolist(), stops,
                             method_reason=reason, seed=seed, start=start, mean=mean,
                             std_dev=sd)
