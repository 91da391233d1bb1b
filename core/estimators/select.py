"""The automatic choice: candidates from the tails in the model, then a short pilot of each,
compared by work-normalised variance (relative variance times a deterministic work proxy)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.diagnostics import ContributionStats
from core.errors import LimitError, MethodError, TailgaugeError
from core.estimators import registry
from core.estimators.base import Group
from core.portfolio import Portfolio
from core.streams import Purpose, Stream

PILOT_SAMPLES = 4096


def candidates(portfolio: Portfolio) -> list[str]:
    """Candidate estimators for the tails in the model (each estimator says when it is one)."""
    return registry.candidates(portfolio)


def plan(name: str, portfolio: Portfolio, x: np.ndarray, seed: int,
         deadline: float | None = None) -> list[Group]:
    return registry.get(name).plan(portfolio, x, seed, deadline=deadline)


@dataclass
class Trial:
    name: str
    groups: list[Group]
    cost: float
    reliable: np.ndarray  # one flag per threshold
    relvar: np.ndarray


def pilot(name: str, portfolio: Portfolio, x: np.ndarray, seed: int,
          deadline: float | None = None) -> Trial:
    groups = plan(name, portfolio, x, seed, deadline)
    relvar = np.full(x.size, math.inf)
    reliable = np.zeros(x.size, dtype=bool)
    cost = 0.0
    for g, group in enumerate(groups):
        # Each candidate pilots on streams of its own (core.streams keys them by name).
        rng = Stream(Purpose.PILOT, registry.get(name).stream, (g,)).rng(seed, 0)
        stats = ContributionStats.from_samples(group.block_values(PILOT_SAMPLES, rng))
        mean = np.asarray(stats.mean(), dtype=float)
        se = np.asarray(stats.std_error(), dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            rv = np.where(mean > 0, (se / mean) ** 2 * PILOT_SAMPLES, math.inf)
        idx = list(group.indices)
        relvar[idx] = rv
        reliable[idx] = [d.reliable for d in stats.diagnose()]
        # A shared sample set costs its work once for all of its thresholds.
        cost += float(np.max(rv)) * group.work
    return Trial(name, groups, cost, reliable, relvar)


def choose(portfolio: Portfolio, x: np.ndarray, seed: int,
           deadline: float | None = None) -> tuple[list[Trial], str]:
    """Trials ordered best first, and the reason in words."""
    trials: list[Trial] = []
    refused: list[TailgaugeError] = []
    for name in candidates(portfolio):
        try:
            trials.append(pilot(name, portfolio, x, seed, deadline))
        except (LimitError, MethodError) as exc:
            # A candidate that cannot serve this request leaves the choice to the others.
            refused.append(exc)
    if not trials:
        raise refused[0]
    trials.sort(key=lambda t: (not t.reliable.all(), t.cost))
    best = trials[0]
    others = ", ".join(
        f"{t.name} {t.cost / best.cost:.3g}x" if math.isfinite(t.cost) and best.cost > 0
        else f"{t.name} (no hits in pilot)" for t in trials[1:]
    )
    tails = "light tails" if portfolio.is_light else "heavy tails"
    reason = (
        f"{tails}: pilot of {PILOT_SAMPLES} samples per candidate; {best.name} has the lowest "
        f"work-normalised variance" + (f" (others relative: {others})" if others else "")
    )
    if not best.reliable.all():
        reason += "; no candidate passed every reliability check in the pilot"
    return trials, reason
