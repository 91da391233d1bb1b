"""Which task runs next on the computation workers, and which requests are refused at once.

Work arrives as jobs (one per engine call). A small job is one task (the whole engine call); a
large job's engine call runs in a server thread and sends its blocks as span tasks
(core.spans). The scheduler hands the backend at most `slots` tasks at a time and picks the
next one by lane:

- small lane first: a small request waits at most for one running task to end (a span is a few
  tenths of a second at most), never behind a large request's queued blocks; but with two
  slots or more one slot is kept for large work while any is queued, so that a steady stream
  of small requests does not starve the large ones;
- then large jobs in arrival order: the oldest job's next span, then the next job's. Arrival
  order (not round-robin) lets the first of several large requests finish at full speed and
  makes the wait of the next one predictable.

Admission: a job's cost is estimated in work units (its sample budget times claims per sample)
and seconds per unit learned from the tasks that ended; a job ahead never counts for more than
the time it has left (the engine stops at its time limit and answers with what it drew). The
work ahead is shared by the slots the job's lane gets: all of them, or while the other lane
has jobs, one for large work and the rest for small work. A job
that could not start within its own wall limit behind the work ahead of it is refused with a
503 and a Retry-After at once, instead of after waiting for the limit.
Cancelled jobs (client gone, time limit) lose their queued tasks; running ones end on their own.
"""

from __future__ import annotations

import math
import threading
import time
from collections import deque
from collections.abc import Callable
from concurrent.futures import CancelledError, Future
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Any, Literal

from service.backends import Backend, LocalBackend

Lane = Literal["small", "large"]

# Seconds per work unit before any task has ended (measured on a 2-core machine of 2026: a
# lognormal claim costs about 60 ns drawn and summed; a whole small call carries fixed costs).
PRIOR_RATE: dict[Lane, float] = {"small": 2e-7, "large": 1e-7}
RATE_MEMORY = 0.2  # weight of the newest measurement in the moving average
# A whole call's fixed cost (pilots, diagnostics, the trip to the worker), seconds.
CALL_OVERHEAD_S = 0.02
MAX_RETRY_AFTER_S = 3600
# Span tasks are started again after a lost worker this many times (same figures: the blocks
# and streams are fixed); Dask does the same on its side for its own workers.
SPAN_ATTEMPTS = 2


class Overloaded(Exception):
    """The job cannot end within its wall limit behind the work already accepted."""

    def __init__(self, wait_s: float, retry_after_s: int) -> None:
        super().__init__(f"predicted {wait_s:.1f} s")
        self.wait_s = wait_s
        self.retry_after_s = retry_after_s


@dataclass(eq=False)
class Task:
    job: Job
    fn: Callable[..., Any]
    args: tuple[Any, ...]
    work: float
    span: bool
    future: Future[Any] = field(default_factory=Future)
    attempts: int = 0


@dataclass(eq=False)
class Job:
    lane: Lane
    work: float
    wall_limit_s: float
    created: float = field(default_factory=time.monotonic)
    pending: deque[Task] = field(default_factory=deque)
    running: int = 0
    done_work: float = 0.0
    cancelled: bool = False

    def remaining(self) -> float:
        return max(0.0, self.work - self.done_work)


def _drop(future: Future[Any]) -> None:
    # A task started once (then queued again after a lost worker) can no longer be cancelled.
    if not future.cancel() and not future.done():
        future.set_exception(CancelledError())


class Scheduler:
    def __init__(self, backend: Backend) -> None:
        self.backend = backend
        self._lock = threading.RLock()
        self._jobs: list[Job] = []
        self._running = 0
        self.rate: dict[Lane, float] = dict(PRIOR_RATE)
        self.spans_started = 0  # span tasks handed to the backend (for tests and the bench)

    # --- jobs ---------------------------------------------------------------------------
    def admit(self, lane: Lane, work: float, wall_limit_s: float) -> Job:
        """A new job, or Overloaded when it could not start within `wall_limit_s`."""
        with self._lock:
            wait = self._ahead_s(lane) / self._lane_slots(lane)
            if wait >= wall_limit_s:
                retry = min(MAX_RETRY_AFTER_S, max(1, math.ceil(wait - wall_limit_s)))
                raise Overloaded(wait, retry)
            job = Job(lane, work, wall_limit_s)
            self._jobs.append(job)
            return job

    def close(self, job: Job) -> None:
        """The job needs nothing more: drop its queued tasks (they are cancelled)."""
        with self._lock:
            job.cancelled = True
            dropped = list(job.pending)
            job.pending.clear()
            if job in self._jobs:
                self._jobs.remove(job)
        for task in dropped:
            _drop(task.future)

    def submit(self, job: Job, fn: Callable[..., Any], *args: Any, work: float,
               span: bool) -> Future[Any]:
        task = Task(job, fn, args, work, span)
        with self._lock:
            if job.cancelled:
                task.future.cancel()
                return task.future
            job.pending.append(task)
            self._pump()
        return task.future

    @property
    def queued(self) -> int:
        with self._lock:
            return sum(len(j.pending) for j in self._jobs)

    # --- cost model ---------------------------------------------------------------------
    def _seconds(self, lane: Lane, work: float) -> float:
        return work * self.rate[lane] + (CALL_OVERHEAD_S if lane == "small" else 0.0)

    def _ahead_s(self, lane: Lane) -> float:
        """Slot-seconds of work ahead of a new job of `lane`: small jobs wait only for small
        work (they go first), large ones for everything, or only for large work while small
        work has slots of its own; a job counts for no more than the slot time it has left
        before its wall limit."""
        now, slots = time.monotonic(), self._lane_slots(lane)
        split = slots < max(1, self.backend.slots)
        total = 0.0
        for j in self._jobs:
            if j.lane == lane or (lane == "large" and not split):
                left = max(0.0, j.created + j.wall_limit_s - now)
                total += min(self._seconds(j.lane, j.remaining()),
                             left * (slots if j.lane == "large" else 1))
        return total

    def _lane_slots(self, lane: Lane) -> int:
        """The slots `lane` gets while the other lane has work (as _next hands them out): with
        two slots or more large work keeps one and small work takes the others."""
        slots = max(1, self.backend.slots)
        other: Lane = "small" if lane == "large" else "large"
        if slots < 2 or not any(j.lane == other for j in self._jobs):
            return slots
        return 1 if lane == "large" else slots - 1

    def _learn(self, lane: Lane, work: float, seconds: float) -> None:
        if work <= 0 or not math.isfinite(seconds):
            return
        if lane == "small":
            seconds = max(0.0, seconds - CALL_OVERHEAD_S)
        rate = seconds / work
        self.rate[lane] = (1 - RATE_MEMORY) * self.rate[lane] + RATE_MEMORY * rate

    # --- dispatch -----------------------------------------------------------------------
    def _next(self) -> Task | None:
        # A steady stream of small requests would otherwise keep every slot and starve the
        # large jobs until their time limit: with two slots or more, a large job's span goes
        # first whenever no large task runs, so large work always holds one slot while small
        # work has the others.
        large_running = any(j.running for j in self._jobs if j.lane == "large")
        order: tuple[Lane, ...] = ("small", "large")
        if self.backend.slots >= 2 and not large_running:
            order = ("large", "small")
        for lane in order:
            for job in self._jobs:
                if job.lane == lane and job.pending:
                    return job.pending.popleft()
        return None

    def _pump(self) -> None:
        while self._running < max(1, self.backend.slots) * self.backend.depth:
            task = self._next()
            if task is None:
                return
            if task.attempts == 0 and not task.future.set_running_or_notify_cancel():
                continue
            self._start(task)

    def _start(self, task: Task) -> None:
        self._running += 1
        task.job.running += 1
        task.attempts += 1
        self.spans_started += task.span
        started = time.monotonic()
        try:
            inner = self.backend.submit(task.fn, *task.args)
        except BaseException as exc:  # a pool that cannot take work (broken, shut down)
            self._running -= 1
            task.job.running -= 1
            task.future.set_exception(exc)
            return
        inner.add_done_callback(lambda f: self._finished(task, f, started))

    def _finished(self, task: Task, inner: Future[Any], started: float) -> None:
        error = None if inner.cancelled() else inner.exception()
        with self._lock:
            self._running -= 1
            task.job.running -= 1
            retry = (isinstance(error, BrokenProcessPool) and task.span
                     and task.attempts < SPAN_ATTEMPTS and not task.job.cancelled)
            if isinstance(error, BrokenProcessPool) and isinstance(self.backend, LocalBackend):
                self.backend.replace_broken()
            if retry:
                task.job.pending.appendleft(task)
            elif error is None and not inner.cancelled():
                task.job.done_work += task.work
                seconds = inner.result()[1] if task.span else time.monotonic() - started
                self._learn(task.job.lane, task.work, seconds)
            self._pump()
        if retry:
            return
        if inner.cancelled():
            _drop(task.future)
        elif error is not None:
            task.future.set_exception(error)
        else:
            task.future.set_result(inner.result())
