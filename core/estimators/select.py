"""The automatic choice: candidates from the tails in the model, then a short pilot of each,
compared by work-normalised variance (relative variance times a deterministic work proxy).

Every pilot draws on a stream of its own, never part of an estimate: auto's figures are the
chosen method's own run, to the last bit, and independent of the choice. Continuing the
winner's pilot was tried and withdrawn: the pilot that looks least variable is the one kept, so
its samples are a biased part of the estimate (30 Weibull(0.3) claims at 1e-8, two candidates
within 5% of each other: z mean +0.43 over 100 seeds, against -0.01 for either method alone).
The pilot's size scales with the request (pilot_samples).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core import spans
from core.errors import LimitError, MethodError, TailgaugeError
from core.estimators import registry
from core.estimators.base import Group
from core.portfolio import Portfolio
from core.precision import GroupRun, draw_blocks, past
from core.sampling import block_size
from core.streams import Purpose, Stream

# The pilot of risk measures' choice (its draws are not the estimate's; core.measures).
PILOT_SAMPLES = 4096
# An exceedance pilot spends about this share of the request per candidate, within bounds:
# the losers' pilots are the price of the choice, so it must stay a small part of the run.
PILOT_SHARE = 0.125
PILOT_MIN, PILOT_MAX = 4096, 65536


def pilot_samples(request: int, block: int) -> int:
    """Pilot size for a request of `request` samples per sample set: whole blocks when it
    reaches one, never more than the request."""
    want = int(min(PILOT_MAX, max(PILOT_MIN, PILOT_SHARE * request)))
    if want >= block:
        want = want // block * block
    return min(int(request), want)


def candidates(portfolio: Portfolio) -> list[str]:
    """Candidate estimators for the tails in the model (each estimator says when it is one)."""
    return registry.candidates(portfolio)


def plan(name: str, portfolio: Portfolio, x: np.ndarray, seed: int,
         deadline: float | None = None, samples: int | None = None) -> list[Group]:
    return registry.get(name).plan(portfolio, x, seed, deadline=deadline, samples=samples)


@dataclass
class Trial:
    name: str
    groups: list[Group]
    cost: float
    reliable: np.ndarray  # one flag per threshold
    relvar: np.ndarray


def _pilot_stats(name: str, group: Group, g: int, seed: int, samples: int | None,
                 portfolio: Portfolio) -> GroupRun:
    stream_name = registry.get(name).stream
    if samples is None:
        # Risk measures: a pilot on a stream of its own, never part of their estimate.
        stats = spans.draw(group, Stream(Purpose.PILOT, stream_name, (g,)), seed,
                           [(0, PILOT_SAMPLES)])
        return GroupRun(stats, PILOT_SAMPLES, "samples")
    # Exceedance: a pilot sized to the request, on the pilot stream (not the estimate's).
    stream = Stream(Purpose.PILOT, stream_name, (g,))
    block = block_size(portfolio)
    return draw_blocks(group, stream, seed, pilot_samples(samples, block), block)


def pilot(name: str, portfolio: Portfolio, x: np.ndarray, seed: int,
          samples: int | None = None, deadline: float | None = None) -> Trial:
    """Pilot one candidate. samples: the request's samples per sample set, which size an
    exceedance pilot; None: a pilot of PILOT_SAMPLES (risk measures)."""
    groups = plan(name, portfolio, x, seed, deadline, samples)
    relvar = np.full(x.size, math.inf)
    reliable = np.zeros(x.size, dtype=bool)
    cost = 0.0
    for g, group in enumerate(groups):
        # Each candidate pilots on streams of its own (core.streams keys them by name).
        run = _pilot_stats(name, group, g, seed, samples, portfolio)
        stats = run.stats
        mean = np.asarray(stats.mean(), dtype=float)
        se = np.asarray(stats.std_error(), dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            rv = np.where(mean > 0, (se / mean) ** 2 * run.samples, math.inf)
        idx = list(group.indices)
        relvar[idx] = rv
        reliable[idx] = [d.reliable for d in stats.diagnose()]
        # A shared sample set costs its work once for all of its thresholds.
        cost += float(np.max(rv)) * group.work
    return Trial(name, groups, cost, reliable, relvar)


def choose(portfolio: Portfolio, x: np.ndarray, seed: int, samples: int | None = None,
           deadline: float | None = None) -> tuple[list[Trial], str]:
    """Trials ordered best first, and the reason in words. samples: as in `pilot`."""
    trials: list[Trial] = []
    refused: list[TailgaugeError] = []
    skipped: list[str] = []
    size = PILOT_SAMPLES
    if samples is not None:
        size = pilot_samples(samples, block_size(portfolio))
    for name in candidates(portfolio):
        if trials and past(deadline):
            # Out of time: the candidates piloted so far are the choice (said in the reason).
            skipped.append(name)
            continue
        try:
            trials.append(pilot(name, portfolio, x, seed, samples, deadline))
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
        f"{tails}: pilot of {size} samples per candidate; {best.name} has the lowest "
        f"work-normalised variance" + (f" (others relative: {others})" if others else "")
    )
    if samples is not None:
        reason += "; the estimate draws apart from the pilots"
    if skipped:
        reason += f"; not piloted (time limit): {', '.join(skipped)}"
    if not best.reliable.all():
        reason += "; no candidate passed every reliability check in the pilot"
    return trials, reason
