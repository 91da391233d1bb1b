"""P(L > x) for a credit portfolio: the credit branch of core.exceedance.exceedance."""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Sequence

import numpy as np

from core import spans
from core.credit.estimators import CREDIT, CREDIT_METHODS, block_size, estimator, plan
from core.credit.model import CreditModel
from core.credit.moments import loss_moments
from core.diagnostics import ContributionStats
from core.estimators import registry
from core.estimators.base import Group
from core.exceedance_records import check_seed, check_thresholds, estimate_record, warnings_for
from core.intervals import Z95
from core.invariants import check_monotone, check_probability
from core.precision import Precision, run_group
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from core.streams import Purpose, Stream

PILOT_SAMPLES = 4096


def check_method(method: str) -> str:
    """auto, or a method of the registry that serves credit books (refused at `method`)."""
    if method != registry.AUTO:
        estimator(method)
    return method


def choose(model: CreditModel, x: np.ndarray, seed: int) -> tuple[list[str], str]:
    """Candidates best first by work-normalised relative variance in a short pilot at the
    extreme thresholds, and the reason in words."""
    top = model.max_loss
    inside = x[x < top]
    probe = np.unique(np.array([inside.min(), inside.max()])) if inside.size else x[:1]
    scores: dict[str, float] = {}
    for name in CREDIT_METHODS:
        cost = 0.0
        for g, group in enumerate(plan(name, model, probe)):
            stream = Stream(Purpose.PILOT, estimator(name).stream_for(CREDIT), (g,))
            stats = spans.draw(group, stream, seed, [(0, PILOT_SAMPLES)])
            mean = np.asarray(stats.mean(), dtype=float)
            se = np.asarray(stats.std_error(), dtype=float)
            with np.errstate(divide="ignore", invalid="ignore"):
                rv = np.where(mean > 0, (se / mean) ** 2 * PILOT_SAMPLES, math.inf)
            cost += float(np.max(rv)) * group.work
        scores[name] = cost
    names = sorted(CREDIT_METHODS, key=lambda n: scores[n])
    best = names[0]
    other = names[1]
    rel = (f"{scores[other] / scores[best]:.3g}x" if math.isfinite(scores[other])
           and scores[best] > 0 else "no hits in pilot")
    return names, (f"obligor groups: pilot of {PILOT_SAMPLES} samples per candidate; {best} "
                   f"has the lowest work-normalised variance ({other} {rel})")


def credit_exceedance(
    model: CreditModel, thresholds: Sequence[float], *, method: str = "auto",
    precision: Precision | None = None, seed: int | None = None,
) -> ExceedanceResult:

    start = time.monotonic()
    x = check_thresholds(thresholds)
    seed = check_seed(seed)
    method = check_method(method)
    precision = precision or Precision()
    deadline = precision.deadline(start)
    if method == registry.AUTO:
        names, reason = choose(model, x, seed)
        name = names[0]
    else:
        name, reason = method, f"{method} requested"
    top = model.max_loss
    possible = np.flatnonzero(x < top)
    found: dict[int, ExceedanceEstimate] = {}
    stops: list[str] = []
    groups = plan(name, model, x[possible]) if possible.size else []
    block = block_size(model)
    for gid, group in enumerate(groups):
        mapped = Group(tuple(int(possible[i]) for i in group.indices), group.block_values,
                       group.work, group.detail)
        stream = Stream(Purpose.SAMPLES, estimator(name).stream_for(CREDIT), (gid,))
        run = run_group(mapped, block, precision, seed, stream,
                        deadline)
        stops.append(run.stopped_by)
        diags = run.stats.diagnose()
        for col, i in enumerate(mapped.indices):
            est = estimate_record(float(x[i]), run.stats, col, run.samples, name, diags[col],
                                  indicator=estimator(name).indicator)
            if model.lines:
                est = _grid_widened(est, run.stats, col, len(mapped.indices))
            # The invariants every result passes (core.invariants) apply here too.
            found[i] = check_probability(est)[0]
    warnings: list[str] = []
    for i in range(x.size):
        if i not in found:
            found[i] = _impossible(float(x[i]), name)
            warnings.append(f"threshold {x[i]:g}: at or above the largest possible loss "
                            f"{top:g}; the probability is exactly 0")
    estimates, notes = check_monotone([found[i] for i in range(x.size)], x.tolist())
    warnings += notes
    order = ("time_limit", "max_samples", "samples", "relative_error")
    stopped = next((s for s in order if s in stops), "exact")
    warnings = warnings_for([e for e in estimates if e.samples > 0]) + warnings
    if stopped == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    mean, sd = loss_moments(model)
    return ExceedanceResult(
        method=name, method_reason=reason, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by=stopped, mean=mean, std_dev=sd, estimates=estimates, warnings=warnings)


def _grid_widened(est: ExceedanceEstimate, stats: ContributionStats, col: int, g: int
                  ) -> ExceedanceEstimate:
    """The interval widened to the lower lattice loss's lower 95% limit and the upper one's
    upper limit: the claim lines' grid error is inside it, never in the standard error."""
    mean = np.asarray(stats.mean(), dtype=float)
    se = np.asarray(stats.std_error(), dtype=float)
    low = max(0.0, float(mean[g + col] - Z95 * se[g + col]))
    high = min(1.0, float(mean[2 * g + col] + Z95 * se[2 * g + col]))
    return dataclasses.replace(est, ci_low=min(est.ci_low, low, est.value),
                               ci_high=max(est.ci_high, high, est.value))


def _impossible(x: float, name: str) -> ExceedanceEstimate:
    diag = Diagnostics(pareto_k=None, effective_samples=0.0, largest_share=None,
                       batch_ratio=None, reliable=True, exact=True,
                       reason="the threshold is at or above the largest possible loss")
    return ExceedanceEstimate(threshold=x, value=0.0, std_error=0.0, relative_error=None,
                              ci_low=0.0, ci_high=0.0, samples=0, hits=0, diagnostics=diag,
                              method=name)
