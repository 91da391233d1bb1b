"""Shared run context of a ruin request, and running groups of paths through the precision loop."""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass

import numpy as np

from core.estimators.base import BlockFn, Group
from core.precision import GroupRun, Precision, run_group
from core.results import RuinEstimate
from core.ruin.process import SurplusProcess
from core.sampling import block_rng


class OutOfTime(Exception):
    """The request's time limit passed inside a block of the capital search (whose blocks of
    far-reaching paths can take minutes): the search stops and reports what it reached."""


# Random-number purposes of ruin paths (core.sampling uses MAIN = 0 and PILOT = 1), so a ruin
# request never reuses the random numbers of an exceedance request with the same seed.
TILTED_PATHS, JUMP_PATHS = 2, 3


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


def on_purpose(fn: BlockFn, purpose: int) -> BlockFn:
    """run_group hands each block the generator of (seed, MAIN, group, block); draw instead from
    (seed, purpose, group, block): the same block plan, on a stream of ruin's own."""

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        seq = rng.bit_generator.seed_seq
        assert isinstance(seq, np.random.SeedSequence)
        _, group, block = seq.spawn_key
        return fn(m, block_rng(int(seq.entropy), purpose, group, block))  # type: ignore[arg-type]

    return values


def run(
    ctx: Context, indices: tuple[int, ...], fn: BlockFn, *, work: float, block: int,
    purpose: int, stream: int, detail: str = "",
) -> GroupRun:
    group = Group(indices, on_purpose(fn, purpose), max(1.0, work), detail)
    return run_group(group, block, ctx.precision, ctx.seed, stream, ctx.deadline)


# The estimates of one run, in the order of the capitals asked for, and how each group stopped.
Batch = tuple[list[RuinEstimate], list[str]]


def stream_id(stream: int, part: int) -> int:
    """Group id of part `part` of sample set `stream` (0: the capitals asked for; 1, 2, ...:
    the grids of the capital search)."""
    return (stream << 16) + part
