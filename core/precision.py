"""The run-until loop: draw blocks until the target relative error, the sample cap or the time
limit is reached, and say which one stopped it."""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from core import spans
from core.diagnostics import ContributionStats
from core.errors import ParameterError
from core.estimators.base import Group
from core.sampling import blocks
from core.streams import Stream

DEFAULT_SAMPLES = 100_000
DEFAULT_MAX_SAMPLES = 2_000_000
TOP_K = 1024
LATE_BLOCK = 256


@dataclass(frozen=True, kw_only=True)
class Precision:
    """What the caller asks for. samples: a fixed count (or the minimum when relative_error is
    also given); relative_error: run until every estimate reaches it; max_samples: the cap
    per sample set; time_limit_s: wall-clock limit for the whole call."""

    relative_error: float | None = None
    samples: int | None = None
    max_samples: int | None = None
    time_limit_s: float | None = None

    def __post_init__(self) -> None:
        re = self.relative_error
        if re is not None and not (0.0 < re < 1.0 and math.isfinite(re)):
            raise ParameterError("precision.relative_error", f"must be in (0, 1), got {re!r}")
        for name in ("samples", "max_samples"):
            v = getattr(self, name)
            if v is not None and (int(v) != v or v < 100):
                raise ParameterError(f"precision.{name}", f"must be an integer >= 100, got {v!r}")
        if self.samples and self.max_samples and self.max_samples < self.samples:
            raise ParameterError("precision.max_samples", "must be >= precision.samples")
        t = self.time_limit_s
        if t is not None and not (t > 0 and math.isfinite(t)):
            raise ParameterError("precision.time_limit_s", f"must be > 0, got {t!r}")

    def deadline(self, start: float) -> float | None:
        """The monotonic time the call must stop at, for a call that began at `start`."""
        return None if self.time_limit_s is None else start + self.time_limit_s

    @property
    def minimum(self) -> int:
        if self.samples is not None:
            return int(self.samples)
        if self.relative_error is not None:
            return min(10_000, self.max_samples or 10_000)
        return DEFAULT_SAMPLES

    @property
    def cap(self) -> int:
        if self.relative_error is None:
            return self.minimum
        return int(self.max_samples or max(DEFAULT_MAX_SAMPLES, self.minimum))


@dataclass
class GroupRun:
    stats: ContributionStats
    samples: int
    stopped_by: str


def past(deadline: float | None) -> bool:
    """Whether a deadline (None: none) has passed."""
    return deadline is not None and time.monotonic() > deadline


def draw_blocks(group: Group, stream: Stream, seed: int, total: int, block: int) -> GroupRun:
    """`total` samples of a group in the blocks of the plan, as run_group draws them (auto's
    exceedance pilots, on a stream of their own)."""
    stats = spans.draw(group, stream, seed, list(blocks(total, block)), top_k=TOP_K)
    return GroupRun(stats, total, "samples")


def _worst_relative_error(stats: ContributionStats) -> float:
    mean = np.asarray(stats.mean(), dtype=float)
    se = np.asarray(stats.std_error(), dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        re = np.where(mean > 0, se / mean, np.inf)
    return float(np.max(re))


def run_group(
    group: Group, block: int, precision: Precision, seed: int, stream: Stream,
    deadline: float | None,
    error_of: Callable[[ContributionStats], float] = _worst_relative_error,
) -> GroupRun:
    """Draw blocks of one group until its stopping rule fires; `error_of` gives the figure
    the relative-error target applies to (by default the worst estimate's)."""
    parts: list[ContributionStats] = []
    done, next_check, index = 0, precision.minimum, 0
    cap = precision.cap
    target = precision.relative_error
    runner = spans.current()
    while True:
        # The round's blocks are fixed before anything runs, so whoever runs which span (the
        # current runner, core.spans), the merged figures are the same.
        plan = list(blocks(next_check - done, block, start=index))
        if done == 0 and plan and past(deadline):
            # Out of time before this sample set began (earlier groups, adaptation): a
            # short first block still gives an estimate with its error, not a whole block
            # past the limit (time-limited figures are not reproducible anyway).
            plan[0] = (plan[0][0], min(plan[0][1], LATE_BLOCK))
        cut = spans.cut(group, stream, seed, plan, top_k=TOP_K, width=runner.width,
                        deadline=spans.wall_deadline(deadline))
        for result in runner(cut):
            parts.append(result.stats)
            done, index = done + result.samples, index + result.blocks
            if not result.complete or past(deadline):
                return GroupRun(ContributionStats.combine(parts), done, "time_limit")
        stats = ContributionStats.combine(parts)
        parts = [stats]
        if target is None:
            return GroupRun(stats, done, "samples")
        worst = error_of(stats)
        if worst <= target:
            return GroupRun(stats, done, "relative_error")
        if done >= cap:
            return GroupRun(stats, done, "max_samples")
        # Aim at the count the current error predicts, growing at most fourfold per round.
        want = done * min(4.0, max(1.25, 1.1 * (worst / target) ** 2)) if math.isfinite(
            worst) else 4.0 * done
        next_check = int(min(cap, max(done + block, want)))
