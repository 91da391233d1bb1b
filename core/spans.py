"""Spans of blocks: the unit of work the run-until loop hands out, and who runs it.

A round of `core.precision.run_group` draws a fixed list of blocks (`core.sampling.blocks`).
It cuts them into `Span`s of consecutive blocks and hands the list to the current
`BlockRunner`, which may run them here, in other processes or on other machines. Each span
returns the merged `ContributionStats` of its blocks; merges do not depend on order or grouping
(core.diagnostics), and block b always draws from the same stream, so the figures are the same
to the last bit whoever ran which span.

The core runs spans itself unless a caller installs a runner for the duration of a call:

    with using(runner):
        core.estimate_exceedance(...)

A runner is any object with a `width` (how many spans it runs at once) and a call taking a
list of spans and returning their results in the same order. It may stop early: results after
the first incomplete one (a span that met its deadline) are not used.
"""

from __future__ import annotations

import contextlib
import contextvars
import math
import time
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Protocol

from core.diagnostics import ContributionStats
from core.estimators.base import Group
from core.streams import Stream

# Work per span at most (Group.work units, about claims drawn; a few tenths of a second):
# small requests sharing the workers wait at most about this long for a free one.
MAX_SPAN_WORK = 2.0 * 2**20
MAX_SPAN_BLOCKS = 64
# Spans per runner slot and round at least, so that uneven spans still keep every slot busy.
SPANS_PER_SLOT = 2


@dataclass(frozen=True)
class Span:
    """Consecutive blocks `first, first + 1, ...` of one group's stream, `sizes` samples each.

    deadline: wall-clock time (time.time(), comparable across processes and machines) after
    which the span stops at the end of its current block; None for no limit.
    """

    group: Group
    stream: Stream
    seed: int
    first: int
    sizes: tuple[int, ...]
    top_k: int
    deadline: float | None = None

    @property
    def samples(self) -> int:
        return sum(self.sizes)

    @property
    def work(self) -> float:
        """The span's deterministic cost proxy (samples times the group's work per sample)."""
        return self.samples * self.group.work


@dataclass(frozen=True)
class SpanResult:
    """The merged statistics of the blocks a span drew (all of them when `complete`)."""

    stats: ContributionStats
    samples: int
    blocks: int
    complete: bool


def run_span(span: Span) -> SpanResult:
    """Draw a span's blocks in order; stop after the block that passes the deadline."""
    parts: list[ContributionStats] = []
    done = 0
    for offset, m in enumerate(span.sizes):
        b = span.first + offset
        values = span.group.block_values(m, span.stream.rng(span.seed, b))
        parts.append(ContributionStats.from_samples(values, top_k=span.top_k, chunk=b))
        done += m
        if span.deadline is not None and time.time() > span.deadline:
            return SpanResult(ContributionStats.combine(parts), done, len(parts), False)
    return SpanResult(ContributionStats.combine(parts), done, len(parts), True)


class BlockRunner(Protocol):
    """Runs spans, possibly elsewhere; returns their results in the order given."""

    @property
    def width(self) -> int: ...

    def __call__(self, spans: Sequence[Span], /) -> Sequence[SpanResult]: ...


class LocalRunner:
    """Runs spans one after another in this process, stopping at the first incomplete one."""

    width = 1

    def __call__(self, spans: Sequence[Span], /) -> list[SpanResult]:
        out: list[SpanResult] = []
        for span in spans:
            out.append(run_span(span))
            if not out[-1].complete:
                break
        return out


LOCAL = LocalRunner()
_current: contextvars.ContextVar[BlockRunner] = contextvars.ContextVar("block_runner",
                                                                       default=LOCAL)


def current() -> BlockRunner:
    return _current.get()


@contextlib.contextmanager
def using(runner: BlockRunner) -> Iterator[BlockRunner]:
    """Let `runner` run every span of the calls made inside the block (this thread only)."""
    token = _current.set(runner)
    try:
        yield runner
    finally:
        _current.reset(token)


def cut(
    group: Group, stream: Stream, seed: int, plan: Sequence[tuple[int, int]], *, top_k: int,
    width: int, deadline: float | None,
) -> list[Span]:
    """Cut a round's blocks `(index, samples)` into spans for a runner of `width` slots.

    How the blocks are cut changes nothing in the figures, only how evenly the work spreads.
    """
    if not plan:
        return []
    block_work = max(m for _, m in plan) * max(group.work, 1.0)
    longest = max(1, min(MAX_SPAN_BLOCKS, math.floor(MAX_SPAN_WORK / block_work)))
    per_span = min(longest, max(1, math.ceil(len(plan) / (SPANS_PER_SLOT * width))))
    spans = []
    for start in range(0, len(plan), per_span):
        chunk = plan[start:start + per_span]
        spans.append(Span(group, stream, seed, chunk[0][0], tuple(m for _, m in chunk), top_k,
                          deadline))
    return spans


def draw(
    group: Group, stream: Stream, seed: int, plan: Sequence[tuple[int, int]], *,
    top_k: int = 1024,
) -> ContributionStats:
    """The merged statistics of the blocks `(index, samples)` of `plan`, drawn by the current
    runner: a pilot or any fixed draw outside the run-until loop, so that it runs where the
    estimate's spans run (never in the thread driving the request) and uses every slot."""
    runner = current()
    results = runner(cut(group, stream, seed, plan, top_k=top_k, width=runner.width,
                         deadline=None))
    return ContributionStats.combine([result.stats for result in results])


def wall_deadline(monotonic_deadline: float | None) -> float | None:
    """A time.monotonic() deadline as wall-clock time, for spans run in other processes."""
    if monotonic_deadline is None:
        return None
    return time.time() + (monotonic_deadline - time.monotonic())
