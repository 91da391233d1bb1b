"""P(S > x) for a list of thresholds: the public entry point of the core."""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np

from core import intervals
from core.diagnostics import MAX_SHARE, ContributionStats
from core.errors import ParameterError
from core.estimators import registry, select
from core.estimators.base import Group
from core.invariants import check_monotone, check_probability
from core.portfolio import Portfolio
from core.precision import GroupRun, Precision, run_group
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from core.sampling import block_size
from core.streams import Purpose, Stream
from core.validate import finite_numbers

# What a request may ask for: auto and every registered estimator (core.estimators.registry).
METHODS = registry.methods()


def draw_seed() -> int:
    # 53 bits so that JSON clients that hold numbers as doubles round-trip it exactly.
    entropy = np.random.SeedSequence().entropy
    assert isinstance(entropy, int)
    return entropy % (1 << 53)


def check_thresholds(thresholds: Sequence[float]) -> np.ndarray:
    return finite_numbers("thresholds", thresholds)


def check_seed(seed: int | None) -> int:
    if seed is None:
        return draw_seed()
    if int(seed) != seed or seed < 0:
        raise ParameterError("seed", f"must be a non-negative integer, got {seed!r}")
    return int(seed)


def _estimate(
    x: float, stats: ContributionStats, col: int, samples: int, method: str,
    diag: Diagnostics,
) -> ExceedanceEstimate:
    p = float(np.asarray(stats.mean())[col])
    hits = int(np.asarray(stats.hits)[col])
    if hits == 0 or p <= 0.0:
        # Nothing observed: the one-sided 95% bound (core.intervals).
        return ExceedanceEstimate(
            threshold=x, value=0.0, std_error=None, relative_error=None, ci_low=0.0,
            ci_high=min(1.0, intervals.no_hit_upper(samples)), samples=samples, hits=0,
            diagnostics=diag, method=method,
        )
    se = float(np.asarray(stats.std_error())[col])
    if registry.get(method).indicator:
        low, high = intervals.clopper_pearson(hits, samples)  # a count of hits
    else:
        low, high = intervals.normal(p, se, upper=1.0)
    return ExceedanceEstimate(
        threshold=x, value=p, std_error=se, relative_error=se / p,
        ci_low=min(low, p), ci_high=max(high, p), samples=samples,
        hits=hits, diagnostics=diag, method=method,
    )


def _run(
    groups: list[Group], x: np.ndarray, name: str, portfolio: Portfolio, precision: Precision,
    seed: int, deadline: float | None, only: set[int] | None = None,
) -> tuple[dict[int, ExceedanceEstimate], list[str]]:
    out: dict[int, ExceedanceEstimate] = {}
    stops: list[str] = []
    block = block_size(portfolio)
    for gid, group in enumerate(groups):
        if only is not None and not only.intersection(group.indices):
            continue
        # Each method has its own streams so a fallback never reuses the first one's draws.
        stream = Stream(Purpose.SAMPLES, registry.get(name).stream, (gid,))
        run: GroupRun = run_group(group, block, precision, seed, stream, deadline)
        stops.append(run.stopped_by)
        diags = run.stats.diagnose()
        for col, i in enumerate(group.indices):
            # Violations of the invariants become flags here, so that auto retries them.
            out[i] = check_probability(
                _estimate(float(x[i]), run.stats, col, run.samples, name, diags[col]))[0]
    return out, stops


def _warnings(estimates: list[ExceedanceEstimate]) -> list[str]:
    notes = []
    for e in estimates:
        d = e.diagnostics
        if e.hits == 0:
            notes.append(f"threshold {e.threshold:g}: no sample reached it; ci_high is a "
                         "one-sided 95% upper bound")
        elif not d.reliable:
            notes.append(f"threshold {e.threshold:g}: estimate flagged unreliable: {d.reason}")
        if d.largest_share is not None and d.largest_share > MAX_SHARE:
            notes.append(f"threshold {e.threshold:g}: one sample carries "
                         f"{100 * d.largest_share:.0f}% of the estimate")
    return notes


def exceedance(
    portfolio: Portfolio, thresholds: Sequence[float], *, method: str = "auto",
    precision: Precision | None = None, seed: int | None = None,
) -> ExceedanceResult:
    """Estimate P(S > x) for every x in `thresholds`, with intervals and diagnostics."""
    start = time.monotonic()
    x = check_thresholds(thresholds)
    seed = check_seed(seed)
    precision = precision or Precision()
    if method == registry.AUTO:
        trials, reason = select.choose(portfolio, x, seed)
    else:
        chosen = registry.get(method)
        if chosen.deterministic:
            return chosen.exceedance_bounds(portfolio, x, precision, seed, start)
        groups = chosen.plan(portfolio, x, seed)
        trials, reason = [select.Trial(method, groups, 0.0, np.ones(x.size, bool),
                                       np.zeros(x.size))], f"{method} requested"
    deadline = None if precision.time_limit_s is None else start + precision.time_limit_s
    best = trials[0]
    found, stops = _run(best.groups, x, best.name, portfolio, precision, seed, deadline)
    if method == "auto":
        for trial in trials[1:]:
            retry = {i for i, e in found.items() if not e.diagnostics.reliable
                     and e.hits > 0 and trial.reliable[i]}
            if not retry:
                continue
            more, more_stops = _run(trial.groups, x, trial.name, portfolio, precision, seed,
                                    deadline, only=retry)
            for i in retry:
                if i in more and more[i].diagnostics.reliable:
                    found[i] = more[i]
                    reason += f"; threshold {x[i]:g} re-estimated by {trial.name} after a flag"
            stops += more_stops
    estimates, notes = check_monotone([found[i] for i in range(x.size)], x.tolist())
    order = ("time_limit", "max_samples", "samples", "relative_error")
    stopped = next(s for s in order if s in stops)
    warnings = _warnings(estimates) + notes
    if stopped == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    used = sorted({e.method for e in estimates})
    return ExceedanceResult(
        method=used[0] if len(used) == 1 else "+".join(used), method_reason=reason, seed=seed,
        elapsed_s=time.monotonic() - start, stopped_by=stopped, mean=portfolio.mean,
        std_dev=portfolio.std_dev, estimates=estimates, warnings=warnings,
    )
