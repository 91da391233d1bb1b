"""From accumulated contributions to RuinEstimate records, and the warnings they call for."""

from __future__ import annotations

import math
from collections.abc import Sequence

from core import intervals
from core.diagnostics import MAX_SHARE, ContributionStats
from core.results import Diagnostics, ExceedanceEstimate, RuinEstimate


def estimate(
    stats: ContributionStats, col: int, *, diag: Diagnostics, capital: float, samples: int,
    method: str, log_scale: float = 0.0, bound: float = 1.0, approximation: float | None = None,
) -> RuinEstimate:
    """Column `col` of `stats` times e^{log_scale} (contributions were stored scaled so that far
    tails do not underflow), with its diagnostics `diag` (stats.diagnose() covers every column
    at once: call it once per sample set). `bound` is the largest unscaled value one
    contribution can take: with no hits, the 95% upper bound is core.intervals' no-hit rule
    scaled by it."""
    hits = int(stats.hits[col])
    mean = float(stats.mean()[col])
    if hits == 0 or mean <= 0.0:
        high = min(1.0, intervals.no_hit_upper(samples, bound))
        return RuinEstimate(
            capital=capital, value=0.0, std_error=None, relative_error=None, ci_low=0.0,
            ci_high=high, samples=samples, hits=0, diagnostics=diag, method=method,
            approximation=approximation,
        )
    se = float(stats.std_error()[col])
    scale = math.exp(log_scale)  # 0 only where psi itself is below the smallest double
    p, s = mean * scale, se * scale
    low, high = intervals.normal(p, s, upper=1.0)
    return RuinEstimate(
        capital=capital, value=p, std_error=s, relative_error=se / mean,
        ci_low=low, ci_high=high, samples=samples,
        hits=hits, diagnostics=diag, method=method, approximation=approximation,
    )


def from_exceedance(e: ExceedanceEstimate, approximation: float | None) -> RuinEstimate:
    return RuinEstimate(
        capital=e.threshold, value=e.value, std_error=e.std_error,
        relative_error=e.relative_error, ci_low=e.ci_low, ci_high=e.ci_high, samples=e.samples,
        hits=e.hits, diagnostics=e.diagnostics, method=e.method, approximation=approximation,
    )


def warnings_for(estimates: Sequence[RuinEstimate]) -> list[str]:
    notes = []
    for e in estimates:
        d = e.diagnostics
        if e.hits == 0:
            notes.append(f"capital {e.capital:g}: no sample path was ruined; ci_high is a "
                         "one-sided 95% upper bound")
        elif not d.reliable:
            notes.append(f"capital {e.capital:g}: estimate flagged unreliable: {d.reason}")
        elif e.value == 0.0:
            notes.append(f"capital {e.capital:g}: the ruin probability is below the smallest "
                         "double and is reported as 0")
        if d.largest_share is not None and d.largest_share > MAX_SHARE:
            notes.append(f"capital {e.capital:g}: one sample carries "
                         f"{100 * d.largest_share:.0f}% of the estimate")
    return notes


def worst_stop(stops: Sequence[str]) -> str:
    order = ("time_limit", "max_samples", "samples", "relative_error")
    return next((s for s in order if s in stops), "samples")

