"""The computation pool: engine calls run here, off the event loop.

A process pool is the default because the engine is CPU-bound Python + numpy; a thread pool
is the fallback where processes cannot be started. Processes are started with "spawn" (not
"fork"), because forking a server that already runs threads can copy held locks.

Core errors pickle with their location and message (``TailgaugeError.__reduce__``), so
they cross the process boundary as they are and are raised again here.
"""

from __future__ import annotations

import asyncio
import multiprocessing
import os
import threading
import time
from collections.abc import Callable
from concurrent.futures import Executor, Future, ProcessPoolExecutor, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Literal

from service.errors import ComputationUnavailable
from service.metrics import Metrics

ORPHAN_CHECK_S = 1.0


def call_engine(fn: Callable[..., Any], args: tuple[Any, ...], kwargs: dict[str, Any]) -> Any:
    """Run in the worker: call the engine (a module-level name the process pool can pickle)."""
    return fn(*args, **kwargs)


def _exit_when_orphaned(parent_pid: int) -> None:
    # A server killed outright (SIGKILL, OOM) cannot stop its workers; they notice instead.
    while True:
        time.sleep(ORPHAN_CHECK_S)
        if os.getppid() != parent_pid:
            os._exit(0)


def _worker_start(parent_pid: int) -> None:
    # Import the engine once per worker process, so the first request does not pay for it.
    import core  # noqa: F401

    threading.Thread(target=_exit_when_orphaned, args=(parent_pid,), daemon=True).start()


def _noop() -> None:
    return None


class ComputePool:
    """Owns the executor; created and shut down by the app's lifespan."""

    def __init__(self, *, kind: Literal["process", "thread"], workers: int, metrics: Metrics):
        self.kind = kind
        self.workers = workers
        self.metrics = metrics
        self._executor: Executor | None = None
        self._lock = threading.Lock()
        self._in_flight = 0

    @property
    def in_flight(self) -> int:
        return self._in_flight

    def start(self) -> None:
        self._executor = self._new_executor()
        if self.kind == "process":
            # Start the workers now (in the background) rather than on the first request.
            for _ in range(self.workers):
                self._executor.submit(_noop)

    def shutdown(self) -> None:
        executor, self._executor = self._executor, None
        if executor is None:
            return
        # Workers hold nothing worth saving: stop them rather than let interpreter exit wait
        # for a computation that nobody will read (ProcessPoolExecutor keeps them private).
        processes = list((getattr(executor, "_processes", None) or {}).values())
        executor.shutdown(wait=False, cancel_futures=True)
        for process in processes:
            process.terminate()

    def _new_executor(self) -> Executor:
        if self.kind == "process":
            return ProcessPoolExecutor(
                max_workers=self.workers,
                mp_context=multiprocessing.get_context("spawn"),
                initializer=_worker_start,
                initargs=(os.getpid(),),
            )
        return ThreadPoolExecutor(max_workers=self.workers, thread_name_prefix="tailgauge")

    def _finished(self, _: Future[Any]) -> None:
        with self._lock:
            self._in_flight -= 1
        self.metrics.in_flight.dec()

    def _submit(
        self, executor: Executor, fn: Callable[..., Any], args: tuple[Any, ...],
        kwargs: dict[str, Any],
    ) -> Future[Any]:
        future = executor.submit(call_engine, fn, args, kwargs)
        with self._lock:
            self._in_flight += 1
        self.metrics.in_flight.inc()
        # Counted down when the work really ends, even if the request gave up waiting.
        future.add_done_callback(self._finished)
        return future

    async def run(
        self, fn: Callable[..., Any], *args: Any, wall_limit_s: float, **kwargs: Any
    ) -> Any:
        """Run ``fn(*args, **kwargs)`` in the pool; give up after ``wall_limit_s`` seconds."""
        executor = self._executor
        if executor is None:
            raise RuntimeError("the computation pool is not started")
        try:
            future = self._submit(executor, fn, args, kwargs)
            outcome = await asyncio.wait_for(asyncio.wrap_future(future), timeout=wall_limit_s)
        except TimeoutError:
            self.metrics.unavailable.labels("time_limit").inc()
            raise ComputationUnavailable(
                ("body", "precision", "time_limit_s"),
                f"the computation did not finish within the server's wall-time limit of "
                f"{wall_limit_s:g} s",
                "time_limit",
            ) from None
        except BrokenProcessPool:
            self.metrics.unavailable.labels("worker_lost").inc()
            self._replace_broken(executor)
            raise ComputationUnavailable(
                ("body",), "a computation worker stopped unexpectedly; try again", "worker_lost"
            ) from None
        return outcome

    def _replace_broken(self, broken: Executor) -> None:
        # Several requests may see the same broken pool; only the first replaces it.
        with self._lock:
            if self._executor is not broken:
                return
            self._executor = self._new_executor()
        broken.shutdown(wait=False, cancel_futures=True)
