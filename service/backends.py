"""Where tasks run: a local process pool (the embedded default), threads, or a Dask cluster.

A backend only starts tasks it is given and reports how many it runs at once (`slots`); the
order in which tasks are given, and how many at a time, is the scheduler's (service.scheduler).
Dask is imported only when `executor: dask` is chosen, so the service starts without it.
"""

from __future__ import annotations

import contextlib
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


class Unavailable(Exception):
    """The backend could not run a task through no fault of the request: the cluster's
    scheduler is unreachable, or the workers running the task died more often than Dask
    retries it. The service answers 503 worker_lost (a batch item is offered again)."""


class DaskBackend:
    """Tasks go to a Dask distributed scheduler. A worker that dies takes its running tasks
    with it; the scheduler starts them again on another worker (Dask's own rule, up to
    `distributed.scheduler.allowed-failures` times), and since a task's random streams are
    fixed by the request, the figures do not change. While the scheduler is unreachable, tasks
    are refused at once (Unavailable) and a background thread connects again every
    `RECONNECT_S` seconds."""

    remote = True
    # A task's trip through the scheduler takes milliseconds: a second task per worker thread
    # waits on the worker, so the thread never idles between spans.
    depth = 2
    SLOTS_REFRESH_S = 5.0
    RECONNECT_S = 2.0

    def __init__(self, address: str, *, connect_timeout_s: float = 10.0) -> None:
        self.address = address
        self.connect_timeout_s = connect_timeout_s
        self.slots = 1
        self._client: Any = None
        self._slots_at = 0.0
        self._lost: tuple[type[BaseException], ...] = ()
        self._client_class: Any = None
        self._reconnecting = threading.Lock()
        self._stopped = threading.Event()

    def start(self) -> None:
        try:
            from distributed import Client, KilledWorker
        except ImportError as exc:  # pragma: no cover - depends on the installation
            raise RuntimeError(
                "executor 'dask' needs the distributed package: pip install 'tailgauge[dask]'"
            ) from exc
        from concurrent.futures import CancelledError

        # Failures of the cluster, not of the task: the connection (OSError, which Dask's
        # CommClosedError is), a task Dask gave up on after its workers died, or a future the
        # cluster cancelled (the scheduler was lost). The engine does no I/O of its own.
        self._lost = (OSError, KilledWorker, CancelledError)
        self._client_class = Client
        self._client = self._connect()
        self._refresh_slots(force=True)

    def _connect(self) -> Any:
        return self._client_class(self.address, timeout=self.connect_timeout_s,
                                  set_as_default=False)

    def _refresh_slots(self, *, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._slots_at < self.SLOTS_REFRESH_S:
            return
        self._slots_at = now
        threads = sum(self._client.nthreads().values())
        self.slots = max(1, int(threads))

    def _reconnect_in_background(self) -> None:
        # Called with a closed client (Dask closes it when the scheduler stays away longer
        # than its connect timeout); one thread at a time tries a new one until it connects.
        if not self._reconnecting.acquire(blocking=False):
            return

        def run() -> None:
            try:
                while not self._stopped.wait(self.RECONNECT_S):
                    try:
                        client = self._connect()
                    except Exception:  # the scheduler is still away
                        continue
                    old, self._client = self._client, client
                    if old is not None:
                        with contextlib.suppress(Exception):
                            old.close()
                    return
            finally:
                self._reconnecting.release()

        threading.Thread(target=run, name="tailgauge-dask-reconnect", daemon=True).start()

    def submit(self, fn: Callable[..., Any], *args: Any) -> Future[Any]:
        client = self._client
        if client is None:
            raise RuntimeError("the computation pool is not started")
        if client.status != "running":
            if client.status in ("closing", "closed"):
                self._reconnect_in_background()
            raise Unavailable(f"the Dask scheduler at {self.address} is not reachable "
                              f"(client {client.status})")
        try:
            self._refresh_slots()
            task = client.submit(fn, *args, pure=False)
        except self._lost as exc:
            raise Unavailable(f"the Dask scheduler at {self.address} is not reachable: "
                              f"{exc}") from exc
        out: Future[Any] = Future()
        lost = self._lost

        def settle(done: Any) -> None:
            if out.done():
                return
            try:
                out.set_result(done.result())
            except lost as exc:
                out.set_exception(Unavailable(f"the Dask cluster did not run the task: "
                                              f"{type(exc).__name__}: {exc}"))
            except BaseException as exc:  # the task's own error, raised again here
                out.set_exception(exc)

        def cancel(f: Future[Any]) -> None:
            if f.cancelled():
                with contextlib.suppress(Exception):  # a client already closed
                    task.cancel()

        out.add_done_callback(cancel)
        task.add_done_callback(settle)
        return out

    def shutdown(self) -> None:
        self._stopped.set()
        client, self._client = self._client, None
        if client is not None:
            client.close()


def make(kind: str, workers: int, dask_scheduler: str | None) -> LocalBackend | DaskBackend:
    if kind == "dask":
        if not dask_scheduler:
            raise ValueError("executor 'dask' needs a scheduler address (dask_scheduler)")
        return DaskBackend(dask_scheduler)
    return LocalBackend(kind, workers)
