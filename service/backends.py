"""Where tasks run: a local process pool (the embedded default), threads, or a Dask cluster.

A backend only starts tasks it is given and reports how many it runs at once (`slots`); the
order in which tasks are given, and how many at a time, is the scheduler's (service.scheduler).
Dask is imported only when `executor: dask` is chosen, so the service starts without it.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
import time
from collections.abc import Callable
from concurrent.futures import Executor, Future, ProcessPoolExecutor, ThreadPoolExecutor
from typing import Any, Protocol

ORPHAN_CHECK_S = 1.0


class Backend(Protocol):
    slots: int
    remote: bool  # tasks cross a process boundary (spans travel packed)
    depth: int  # tasks handed over per slot: more than one hides a slow round trip

    def start(self) -> None: ...

    def submit(self, fn: Callable[..., Any], *args: Any) -> Future[Any]: ...

    def shutdown(self) -> None: ...


def _exit_when_orphaned(parent_pid: int) -> None:
    # A server killed outright (SIGKILL, OOM) cannot stop its workers; they notice instead.
    while True:
        time.sleep(ORPHAN_CHECK_S)
        if os.getppid() != parent_pid:
            os._exit(0)


def _worker_start(parent_pid: int) -> None:
    # Import the engine once per worker process, so the first request does not pay for it.
    import core  # noqa: F401
    import service.tasks  # noqa: F401

    threading.Thread(target=_exit_when_orphaned, args=(parent_pid,), daemon=True).start()


def _noop() -> None:
    return None


class LocalBackend:
    """A process pool ("spawn": forking a server that runs threads can copy held locks) or a
    thread pool. A lost process breaks the pool; `replace_broken` starts a new one."""

    def __init__(self, kind: str, workers: int) -> None:
        self.kind = kind
        self.slots = workers
        self.remote = kind == "process"
        self.depth = 1
        self._executor: Executor | None = None
        self._lock = threading.Lock()

    def _new(self) -> Executor:
        if self.kind == "process":
            return ProcessPoolExecutor(
                max_workers=self.slots, mp_context=multiprocessing.get_context("spawn"),
                initializer=_worker_start, initargs=(os.getpid(),))
        return ThreadPoolExecutor(max_workers=self.slots, thread_name_prefix="tailgauge")

    def start(self) -> None:
        self._executor = self._new()
        if self.kind == "process":
            # Start the workers now (in the background) rather than on the first request.
            for _ in range(self.slots):
                self._executor.submit(_noop)

    def submit(self, fn: Callable[..., Any], *args: Any) -> Future[Any]:
        executor = self._executor
        if executor is None:
            raise RuntimeError("the computation pool is not started")
        return executor.submit(fn, *args)

    def replace_broken(self) -> None:
        # Several tasks may see the same broken pool; only the first replaces it.
        with self._lock:
            broken = self._executor
            if broken is None or not getattr(broken, "_broken", False):
                return
            self._executor = self._new()
        broken.shutdown(wait=False, cancel_futures=True)

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


class DaskBackend:
    """Tasks go to a Dask distributed scheduler. A worker that dies takes its running tasks
    with it; the scheduler starts them again on another worker (Dask's own rule, up to
    `distributed.scheduler.allowed-failures` times), and since a task's random streams are
    fixed by the request, the figures do not change."""

    remote = True
    # A task's trip through the scheduler takes milliseconds: a second task per worker thread
    # waits on the worker, so the thread never idles between spans.
    depth = 2
    SLOTS_REFRESH_S = 5.0

    def __init__(self, address: str, *, connect_timeout_s: float = 10.0) -> None:
        self.address = address
        self.connect_timeout_s = connect_timeout_s
        self.slots = 1
        self._client: Any = None
        self._slots_at = 0.0

    def start(self) -> None:
        try:
            from distributed import Client
        except ImportError as exc:  # pragma: no cover - depends on the installation
            raise RuntimeError(
                "executor 'dask' needs the distributed package: pip install 'tailgauge[dask]'"
            ) from exc
        self._client = Client(  # type: ignore[no-untyped-call]
            self.address, timeout=self.connect_timeout_s, set_as_default=False)
        self._refresh_slots(force=True)

    def _refresh_slots(self, *, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._slots_at < self.SLOTS_REFRESH_S:
            return
        self._slots_at = now
        threads = sum(self._client.nthreads().values())
        self.slots = max(1, int(threads))

    def submit(self, fn: Callable[..., Any], *args: Any) -> Future[Any]:
        client = self._client
        if client is None:
            raise RuntimeError("the computation pool is not started")
        self._refresh_slots()
        out: Future[Any] = Future()
        task = client.submit(fn, *args, pure=False)

        def settle(done: Any) -> None:
            if out.done():
                return
            try:
                if done.status == "cancelled":
                    out.cancel()
                    out.set_running_or_notify_cancel()
                    return
                out.set_result(done.result())
            except BaseException as exc:  # the task's own error, raised again here
                if not out.done():
                    out.set_exception(exc)

        def cancel(f: Future[Any]) -> None:
            if f.cancelled():
                task.cancel()

        out.add_done_callback(cancel)
        task.add_done_callback(settle)
        return out

    def shutdown(self) -> None:
        client, self._client = self._client, None
        if client is not None:
            client.close()


def make(kind: str, workers: int, dask_scheduler: str | None) -> LocalBackend | DaskBackend:
    if kind == "dask":
        if not dask_scheduler:
            raise ValueError("executor 'dask' needs a scheduler address (dask_scheduler)")
        return DaskBackend(dask_scheduler)
    return LocalBackend(kind, workers)
