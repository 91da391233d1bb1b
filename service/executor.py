"""The computation pool: engine calls run here, off the event loop.

Where tasks run is a backend (service.backends): a process pool by default (the engine is
CPU-bound Python + numpy), threads where processes cannot be started, or a Dask cluster. In
what order they run, and which requests are refused at once, is the scheduler's
(service.scheduler).

A small request is one task: the whole engine call in a worker. A large one (its sample budget
at least `split_samples`) is driven from a server thread: the engine's run-until loop sends its
blocks as span tasks (core.spans) through the scheduler, so one request uses every worker and
the figures are the same to the last bit on 1, 2 or N workers, or on a cluster.

Core errors pickle with their location and message (``TailgaugeError.__reduce__``), so
they cross the process boundary as they are and are raised again here.
"""

from __future__ import annotations

import asyncio
import threading
from collections.abc import Awaitable, Callable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, replace
from typing import Any, Literal

from core import spans
from service import backends, tasks
from service.errors import ComputationUnavailable
from service.metrics import Metrics
from service.scheduler import Job, Overloaded, Scheduler

# Kept here for callers that name it (the worker-side function of a whole engine call).
call_engine = tasks.call_engine

GONE_POLL_S = 0.25  # how often a waiting request checks that its client is still there
# Server threads driving large requests at once. Large jobs are served in arrival order, so a
# few keep every worker busy; more would only compete with the event loop for the GIL.
MIN_DRIVERS, MAX_DRIVERS = 2, 8


@dataclass(frozen=True)
class Cost:
    """What the pipeline knows of a call's cost before it runs: its sample budget, a work
    proxy per sample, and whether to split its blocks across the workers."""

    samples: int
    per_sample: float = 1.0
    split: bool = False

    @property
    def work(self) -> float:
        return self.samples * self.per_sample


class _JobRunner:
    """The core's block runner (core.spans.BlockRunner) for one large job: its spans go
    through the scheduler, and come back in block order."""

    def __init__(self, scheduler: Scheduler, job: Job, per_sample: float, remote: bool):
        self.scheduler, self.job = scheduler, job
        self.per_sample, self.remote = per_sample, remote
        self._packed: tuple[object, bytes] | None = None

    @property
    def width(self) -> int:
        return max(1, self.scheduler.backend.slots)

    def _blob(self, group: object) -> bytes:
        # A round's spans share one group: pack it once (and again only for a new group).
        if self._packed is None or self._packed[0] is not group:
            self._packed = (group, tasks.pack_group(group))
        return self._packed[1]

    def __call__(self, cut: Sequence[spans.Span], /) -> list[spans.SpanResult]:
        futures = []
        for span in cut:
            work = span.samples * self.per_sample
            if self.remote:
                light = replace(span, group=replace(span.group, block_values=tasks.no_values))
                futures.append(self.scheduler.submit(
                    self.job, tasks.run_packed_span, self._blob(span.group), light, work=work,
                    span=True))
            else:
                futures.append(self.scheduler.submit(self.job, tasks.run_span, span, work=work,
                                                     span=True))
        out: list[spans.SpanResult] = []
        for future in futures:
            out.append(future.result()[0])
            if not out[-1].complete:
                break
        return out


class ComputePool:
    """Owns the backend and the scheduler; created and shut down by the app's lifespan."""

    def __init__(self, *, kind: Literal["process", "thread", "dask"], workers: int,
                 metrics: Metrics, dask_scheduler: str | None = None) -> None:
        self.kind = kind
        self.metrics = metrics
        self.backend = backends.make(kind, workers, dask_scheduler)
        self.scheduler = Scheduler(self.backend)
        self._drivers: ThreadPoolExecutor | None = None
        self._lock = threading.Lock()
        self._in_flight = 0

    @property
    def workers(self) -> int:
        return self.backend.slots

    @property
    def in_flight(self) -> int:
        return self._in_flight

    def start(self) -> None:
        self.backend.start()
        drivers = min(MAX_DRIVERS, max(MIN_DRIVERS, self.backend.slots))
        self._drivers = ThreadPoolExecutor(max_workers=drivers,
                                           thread_name_prefix="tailgauge-driver")

    def shutdown(self) -> None:
        drivers, self._drivers = self._drivers, None
        if drivers is not None:
            drivers.shutdown(wait=False, cancel_futures=True)
        self.backend.shutdown()

    def _counted(self, future: Future[Any], job: Job) -> None:
        with self._lock:
            self._in_flight += 1
        self.metrics.in_flight.inc()

        def finished(_: Future[Any]) -> None:
            self.scheduler.close(job)
            with self._lock:
                self._in_flight -= 1
            self.metrics.in_flight.dec()

        # Counted down when the work really ends, even if the request gave up waiting.
        future.add_done_callback(finished)

    def _drive(self, job: Job, per_sample: float, fn: Callable[..., Any],
               args: tuple[Any, ...], kwargs: dict[str, Any]) -> Any:
        runner = _JobRunner(self.scheduler, job, per_sample, self.backend.remote)
        with spans.using(runner):
            return fn(*args, **kwargs)

    def _admit(self, cost: Cost, wall_limit_s: float) -> Job:
        try:
            return self.scheduler.admit("large" if cost.split else "small", cost.work,
                                        wall_limit_s)
        except Overloaded as exc:
            self.metrics.unavailable.labels("overloaded").inc()
            raise ComputationUnavailable(
                ("body",),
                f"the server is busy: the work already accepted would not leave this request "
                f"time to finish within its wall-time limit of {wall_limit_s:g} s (predicted "
                f"{exc.wait_s:.3g} s); try again later",
                "overloaded", retry_after_s=exc.retry_after_s,
            ) from None

    async def run(
        self, fn: Callable[..., Any], *args: Any, wall_limit_s: float, cost: Cost | None = None,
        gone: Callable[[], Awaitable[bool]] | None = None, **kwargs: Any,
    ) -> Any:
        """Run ``fn(*args, **kwargs)`` on the workers; give up after ``wall_limit_s`` seconds,
        or when ``gone()`` says the client has left (its queued work is dropped)."""
        drivers = self._drivers
        if drivers is None:
            raise RuntimeError("the computation pool is not started")
        cost = cost or Cost(samples=0)
        job = self._admit(cost, wall_limit_s)
        if cost.split:
            future = drivers.submit(self._drive, job, cost.per_sample, fn, args, kwargs)
        else:
            future = self.scheduler.submit(job, tasks.call_engine, fn, args, kwargs,
                                           work=cost.work, span=False)
        self._counted(future, job)
        try:
            return await _wait(future, wall_limit_s, gone)
        except TimeoutError:
            self.scheduler.close(job)
            self.metrics.unavailable.labels("time_limit").inc()
            raise ComputationUnavailable(
                ("body", "precision", "time_limit_s"),
                f"the computation did not finish within the server's wall-time limit of "
                f"{wall_limit_s:g} s",
                "time_limit",
            ) from None
        except _ClientGone:
            self.scheduler.close(job)
            self.metrics.unavailable.labels("client_gone").inc()
            raise ComputationUnavailable(
                ("body",), "the client closed the connection; its computation was dropped",
                "client_gone") from None
        except BrokenProcessPool:
            self.scheduler.close(job)
            self.metrics.unavailable.labels("worker_lost").inc()
            raise ComputationUnavailable(
                ("body",), "a computation worker stopped unexpectedly; try again", "worker_lost"
            ) from None
        except backends.Unavailable as exc:
            self.scheduler.close(job)
            self.metrics.unavailable.labels("worker_lost").inc()
            raise ComputationUnavailable(
                ("body",), f"the computation cluster could not run this request ({exc}); try "
                "again", "worker_lost") from None


class _ClientGone(Exception):
    pass


async def _wait(future: Future[Any], limit_s: float,
                gone: Callable[[], Awaitable[bool]] | None) -> Any:
    waiting = asyncio.wrap_future(future)
    if gone is None:
        return await asyncio.wait_for(waiting, timeout=limit_s)
    loop = asyncio.get_running_loop()
    deadline = loop.time() + limit_s
    while True:
        left = deadline - loop.time()
        if left <= 0:
            waiting.cancel()
            raise TimeoutError
        done, _ = await asyncio.wait({waiting}, timeout=min(GONE_POLL_S, left))
        if done:
            return waiting.result()
        if await gone():
            waiting.cancel()
            raise _ClientGone
