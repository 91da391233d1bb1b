"""Shared run context of a ruin request, and running groups of paths through the precision loop."""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass

from core.estimators.base import BlockFn, Group
from core.precision import GroupRun, Precision, run_group
from core.results import RuinEstimate
from core.ruin.process import SurplusProcess
from core.streams import Purpose, Stream


class OutOfTime(Exception):
    """The request's time limit passed inside a block of the capital search (whose blocks of
    far-reaching paths can take minutes): the search stops and reports what it reached."""


@dataclass(frozen=True)
class Context:
    process: SurplusProcess
    horizon: float  # math.inf for the infinite horizon
    precision: Precision
    seed: int
    deadline: float | None
    gamma: float | None  # the adjustment coefficient, where there is one
    constant: float | None  # the Cramer-Lundberg constant C, with gamma

    def remaining(self) -> Precision:
        """The precision with its time limit cut to what is left of the request's."""
        if self.deadline is None:
            return self.precision
        left = max(self.deadline - time.monotonic(), 1e-3)
        return dataclasses.replace(self.precision, time_limit_s=left)


def run(
    ctx: Context, indices: tuple[int, ...], fn: BlockFn, *, work: float, block: int,
    stream: Stream, detail: str = "",
) -> GroupRun:
    """Run one sample set of paths; `stream` keys its random numbers (core.streams: ruin paths
    have purposes of their own, so they never reuse an exceedance request's draws)."""
    group = Group(indices, fn, max(1.0, work), detail)
    return run_group(group, block, ctx.precision, ctx.seed, stream, ctx.deadline)


# The estimates of one run, in the order of the capitals asked for, and how each group stopped.
Batch = tuple[list[RuinEstimate], list[str]]


def paths_stream(purpose: Purpose, method: str, sample_set: int, part: int) -> Stream:
    """The stream of part `part` (a tilt set) of sample set `sample_set` (0: the capitals asked
    for; 1, 2, ...: the grids of the capital search)."""
    return Stream(purpose, method, (sample_set, part))
