"""From accumulated contributions to ExceedanceEstimate records and their warnings, and the
request checks every exceedance entry point shares (thresholds, seed). Used by core.exceedance
and core.credit.exceedance."""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np

from core import intervals
from core.diagnostics import MAX_SHARE, ContributionStats
from core.errors import ParameterError
from core.invariants import check_monotone
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from core.validate import finite_numbers


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


def estimate_record(
    x: float, stats: ContributionStats, col: int, samples: int, method: str,
    diag: Diagnostics, *, indicator: bool = False,
) -> ExceedanceEstimate:
    """Column `col` of `stats` as the estimate of P(S > x); `indicator`: the contributions are
    0/1 hits, so the interval is the exact binomial one."""
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
    if indicator:
        low, high = intervals.clopper_pearson(hits, samples)  # a count of hits
    else:
        low, high = intervals.normal(p, se, upper=1.0)
    return ExceedanceEstimate(
        threshold=x, value=p, std_error=se, relative_error=se / p,
        ci_low=min(low, p), ci_high=max(high, p), samples=samples,
        hits=hits, diagnostics=diag, method=method,
    )


def warnings_for(estimates: list[ExceedanceEstimate]) -> list[str]:
    """The notes a list of exceedance estimates calls for (no hits, flags, a dominant sample)."""
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


def exceedance_result(
    found: Sequence[ExceedanceEstimate], x: Sequence[float], stops: Sequence[str], *,
    method_reason: str, seed: int, start: float, mean: float, std_dev: float,
) -> ExceedanceResult:
    """The one way every exceedance entry point closes: the monotonicity check over the
    thresholds, the strongest stop reason, the warnings, and the method label."""
    estimates, notes = check_monotone(list(found), list(x))
    order = ("time_limit", "max_samples", "samples", "relative_error")
    stopped = next(s for s in order if s in stops)
    warnings = warnings_for(estimates) + notes
    if stopped == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    used = sorted({e.method for e in estimates})
    return ExceedanceResult(
        method=used[0] if len(used) == 1 else "+".join(used), method_reason=method_reason,
        seed=seed, elapsed_s=time.monotonic() - start, stopped_by=stopped, mean=mean,
        std_dev=std_dev, estimates=estimates, warnings=warnings)
