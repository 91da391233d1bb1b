"""The run worker: takes queued batch items from the run store and computes them.

Items run as asyncio tasks in the service process (``run_workers`` at a time), each through
``service.pipeline.run`` with ``KINDS[kind]`` (exactly what the synchronous endpoint runs) on
the app's ComputePool. An item's outcome is committed the moment it finishes. At start-up, items a
stopped server left running are requeued (or failed after ``run_max_attempts`` starts); at a
clean shutdown, running items go back to the queue without counting the attempt.

Store faults: a slot whose finished item cannot be committed (disk full, database locked)
keeps the outcome and commits it as soon as the store takes writes again, so nothing
finished is lost and no item stays ``running`` once space is back; while the last write
failed, slots claim no new work and probe the store instead. If the server stops first, the
item is requeued (at a clean stop by ``release_running``, after kill -9 by ``recover``) and
recomputed with its stored seed, giving the same figures.

The same worker runs ``tailgauge run`` with a throw-away in-memory store.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any

from prometheus_client import Counter
from pydantic import BaseModel

import core
from service import pipeline
from service.batches import (
    IdempotencyConflict,
    batch_hash,
    prepare_batch,
    validate_request,
)
from service.datadir import DataDirLock, open_store
from service.errors import ComputationUnavailable, detail_entry, problem
from service.executor import ComputePool
from service.metrics import Metrics
from service.resources import KINDS
from service.schemas.runs import (
    ProgressOut,
    RunBatchIn,
    RunItemCancelled,
    RunItemDone,
    RunItemFailed,
    RunItemIn,
    RunOut,
    RunSummary,
)
from service.settings import Settings
from service.store import (
    ItemRecord,
    RunRecord,
    RunStatus,
    RunStore,
    SqliteRunStore,
)
from service.store_faults import Fault, StoreUnavailable

log = logging.getLogger("tailgauge.runs")

IDLE_POLL_S = 1.0  # an idle slot looks at the queue this often even without a wake-up
COMMIT_RETRY_S = (0.2, 5.0)  # first and longest wait between commits of a held outcome
TERMINAL = frozenset({"done", "failed", "cancelled"})
OVERLOAD_WAIT_S = 5.0  # longest wait before an item refused for overload is offered again

ItemCallback = Callable[[ItemRecord, RunRecord], None]
Kind = pipeline.Resource[Any, Any]


# --- views ----------------------------------------------------------------------------------


def summary(run: RunRecord) -> RunSummary:
    p = run.progress
    return RunSummary(
        run_id=run.run_id, name=run.name, status=run.status,
        progress=ProgressOut(done=p.finished, total=p.total, failed=p.failed,
                             running=p.running, queued=p.queued, cancelled=p.cancelled),
        engine_version=run.engine_version, created_at=run.created_at, updated_at=run.updated_at,
    )


def _item_out(item: ItemRecord) -> RunItemDone | RunItemFailed | RunItemCancelled | None:
    common = {"id": item.item_id, "kind": item.kind, "seed": item.seed, "status": item.status}
    if item.status == "done":
        return RunItemDone.model_validate({
            **common, "attempts": item.attempts, "engine_version": item.engine_version or "",
            "result": item.result or {},
        })
    if item.status == "failed":
        return RunItemFailed.model_validate(
            {**common, "attempts": item.attempts, "error": item.error or []}
        )
    if item.status == "cancelled":
        return RunItemCancelled.model_validate(common)
    return None  # queued or running: not finished


def run_view(run: RunRecord, items: list[ItemRecord]) -> RunOut:
    """The body of GET /v1/runs/{run_id} (and of tailgauge run's output file)."""
    results = [out for out in map(_item_out, items) if out is not None]
    return RunOut(**summary(run).model_dump(), results=results)


def batch_view(run: RunRecord, items: list[ItemRecord]) -> RunBatchIn:
    """The batch as stored, seeds included: submitting it again repeats the run exactly."""
    return RunBatchIn(name=run.name, items=[
        RunItemIn(id=item.item_id, kind=item.kind, request=item.request)  # type: ignore[arg-type]
        for item in items
    ])


# --- computing one item ---------------------------------------------------------------------


@dataclass(frozen=True)
class Outcome:
    result: dict[str, Any] | None = None
    error: list[dict[str, Any]] | None = None
    retry: bool = False  # the pool lost a worker: try the item again


def _failed(loc: list[str | int], msg: str, type_: str) -> Outcome:
    return Outcome(error=[detail_entry(loc, msg, type_)])


async def compute_item(
    item: ItemRecord, *, kinds: Mapping[str, Kind], settings: Settings, pool: ComputePool,
    metrics: Metrics,
) -> Outcome:
    """The synchronous endpoint's body for the item's request, or its 422 detail list (the
    endpoint's own answer, from the one error mapping ``service.errors.problem``)."""
    kind = kinds.get(item.kind)
    if kind is None:  # offered at submission, gone after an upgrade
        return _failed(["body"], f"kind '{item.kind}' is not available on this server",
                       "kind_unavailable")
    context = pipeline.Context(settings=settings, pool=pool, metrics=metrics)
    try:
        # Validated as FastAPI validates a body, so that the errors are the endpoint's.
        request = validate_request(kind, item.request)
        response: BaseModel = await _run_when_admitted(kind, request, context)
    except Exception as exc:
        answer = problem(exc)
        if answer.kind == "worker_lost" and item.attempts < settings.run_max_attempts:
            return Outcome(retry=True)
        if answer.status >= 500 and answer.kind == "internal_error":
            # a bug: fail this item, keep the batch going
            log.exception("batch item %s of run %s raised", item.item_id, item.run_id)
        return Outcome(error=answer.detail)
    return Outcome(result=response.model_dump(mode="json", by_alias=True))


async def _run_when_admitted(kind: Kind, request: BaseModel, context: pipeline.Context
                             ) -> BaseModel:
    # An HTTP caller refused for overload is told to come back; a batch item just waits.
    while True:
        try:
            return await pipeline.run(kind, request, context)
        except ComputationUnavailable as exc:
            if exc.kind != "overloaded":
                raise
            await asyncio.sleep(min(OVERLOAD_WAIT_S, exc.retry_after_s or OVERLOAD_WAIT_S))


# --- the worker -----------------------------------------------------------------------------


class RunWorker:
    """Owns the run store while started; ``run_workers`` slots take items from its queue."""

    def __init__(
        self, *, settings: Settings, pool: ComputePool, metrics: Metrics,
        kinds: Mapping[str, Kind] | None = None,
        store_factory: Callable[[], RunStore] | None = None,
        on_item: ItemCallback | None = None,
    ) -> None:
        self.settings = settings
        self.pool = pool
        self.metrics = metrics
        self.kinds = KINDS if kinds is None else kinds
        self.slots = settings.run_workers or settings.workers
        self._store_factory = store_factory
        self._on_item = on_item
        self._store: RunStore | None = None
        self._data_dir_lock: DataDirLock | None = None
        self._tasks: list[asyncio.Task[None]] = []
        self._wake = asyncio.Event()
        self._changed = asyncio.Event()
        self._stopping = False
        self.finished = Counter(
            "tailgauge_run_items_finished",
            "Batch items finished by the run worker, by kind and status (done or failed).",
            ["kind", "status"],
            registry=metrics.registry,
        )

    @property
    def store(self) -> RunStore:
        if self._store is None:
            raise RuntimeError("the run worker is not started")
        return self._store

    @property
    def store_fault(self) -> Fault | None:
        """The store's fault in force, for health (no disk access)."""
        return None if self._store is None else self._store.fault

    def _open_store(self) -> RunStore:
        if self._store_factory is not None:
            return self._store_factory()
        lock = DataDirLock.acquire(self.settings.data_dir)  # DataDirError: another server
        try:
            store = open_store(self.settings, lock)
        except BaseException:
            lock.release()
            raise
        self._data_dir_lock = lock
        return store

    async def start(self) -> None:
        self._stopping = False
        self._wake, self._changed = asyncio.Event(), asyncio.Event()  # bound to this loop
        self._store = await asyncio.to_thread(self._open_store)
        recovery = await asyncio.to_thread(
            self._store.recover, max_attempts=self.settings.run_max_attempts
        )
        if recovery.requeued or recovery.failed:
            log.warning("runs: %d interrupted items requeued, %d failed (started "
                        "run_max_attempts=%d times)", len(recovery.requeued),
                        len(recovery.failed), self.settings.run_max_attempts)
        if self.settings.run_workers is None and self.pool.kind == "dask":
            self.slots = self.pool.workers  # the cluster's threads, known once connected
        self._tasks = [asyncio.create_task(self._slot(), name=f"run-slot-{i}")
                       for i in range(self.slots)]

    async def stop(self) -> None:
        self._stopping = True
        for task in self._tasks:
            task.cancel()
        await asyncio.gather(*self._tasks, return_exceptions=True)
        self._tasks = []
        store, self._store = self._store, None
        if store is not None:
            # A clean shutdown is not the item's fault: its attempt is not counted.
            try:
                await asyncio.to_thread(store.release_running)
            except StoreUnavailable as exc:  # the next start's recover() requeues them
                log.warning("runs: running items not released at shutdown: %s", exc.cause)
            await asyncio.to_thread(store.close)
        lock, self._data_dir_lock = self._data_dir_lock, None
        if lock is not None:
            lock.release()

    def wake(self) -> None:
        self._wake.set()

    async def submit(
        self, batch: RunBatchIn, *, idempotency_key: str | None, owner: str | None = None
    ) -> tuple[RunRecord, bool]:
        """Store the batch as a new run (or find the run of the same key) and wake the slots."""
        items = prepare_batch(batch, kinds=self.kinds, settings=self.settings)
        fingerprint = batch_hash(batch)
        run, created = await asyncio.to_thread(
            self.store.create_run, name=batch.name, items=items,
            engine_version=core.ENGINE_VERSION, batch_hash=fingerprint,
            idempotency_key=idempotency_key, owner=owner,
        )
        if not created and run.batch_hash != fingerprint:
            raise IdempotencyConflict(run.run_id)
        self.wake()
        return run, created

    async def view(self, run_id: str, *, owner: str | None = None) -> RunOut | None:
        snapshot = await asyncio.to_thread(self.store.read_run, run_id, owner=owner)
        return None if snapshot is None else run_view(*snapshot)

    async def run_and_batch(self, run_id: str, *, owner: str | None = None
                            ) -> tuple[RunOut, RunBatchIn] | None:
        """The run's view and its stored batch, from one read (None: no such run)."""
        snapshot = await asyncio.to_thread(self.store.read_run, run_id, owner=owner)
        return None if snapshot is None else (run_view(*snapshot), batch_view(*snapshot))

    async def batch(self, run_id: str, *, owner: str | None = None) -> RunBatchIn | None:
        """The run's batch as stored, seeds included (None: no such run for this owner)."""
        snapshot = await asyncio.to_thread(self.store.read_run, run_id, owner=owner)
        return None if snapshot is None else batch_view(*snapshot)

    async def cancel(self, run_id: str, *, owner: str | None = None) -> RunOut | None:
        """Cancel the run's queued items; the run afterwards (None: no such run)."""
        if await asyncio.to_thread(self.store.cancel_run, run_id, owner=owner) is None:
            return None
        self._changed.set()
        return await self.view(run_id, owner=owner)

    async def list_runs(
        self, *, status: RunStatus | None, limit: int, offset: int, before_seq: int | None,
        owner: str | None = None,
    ) -> list[RunRecord]:
        """Runs newest first (at most ``limit``), after ``offset`` or below ``before_seq``."""
        return await asyncio.to_thread(
            self.store.list_runs, status=status, limit=limit, offset=offset,
            before_seq=before_seq, owner=owner,
        )

    async def wait_finished(self, run_id: str) -> RunRecord:
        """Return once the run is done, failed or cancelled."""
        while True:
            self._changed.clear()
            run = await asyncio.to_thread(self.store.get_run, run_id)
            if run is None:
                raise KeyError(run_id)
            if run.status in TERMINAL and run.progress.running == 0:
                return run
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._changed.wait(), timeout=IDLE_POLL_S)

    async def _slot(self) -> None:
        while not self._stopping:
            try:
                if self.store.write_fault is not None:
                    # The last write failed: compute nothing that could not be stored.
                    await asyncio.to_thread(self.store.probe)
                item = await asyncio.to_thread(self.store.claim_next)
                if item is None:
                    await self._idle()
                else:
                    await self._run(item)
            except asyncio.CancelledError:
                raise
            except StoreUnavailable:  # disk full, locked: health says so; wait and look again
                await asyncio.sleep(IDLE_POLL_S)
            except Exception:  # a bug: log, back off, go on
                log.exception("run worker slot failed")
                await asyncio.sleep(IDLE_POLL_S)

    async def _idle(self) -> None:
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(self._wake.wait(), timeout=IDLE_POLL_S)
        self._wake.clear()

    async def _run(self, item: ItemRecord) -> None:
        outcome = await compute_item(
            item, kinds=self.kinds, settings=self.settings, pool=self.pool, metrics=self.metrics
        )
        if outcome.retry:
            await asyncio.to_thread(self.store.requeue_item, item, count_attempt=True)
            return
        if not await self._commit(item, outcome):
            return
        status = "done" if outcome.error is None else "failed"
        self.finished.labels(item.kind, status).inc()
        self._changed.set()
        if self._on_item is not None:
            run = await asyncio.to_thread(self.store.get_run, item.run_id)
            if run is not None:
                self._on_item(_finished_copy(item, status, outcome), run)


    async def _commit(self, item: ItemRecord, outcome: Outcome) -> bool:
        """Commit the outcome, holding it through store faults until a commit works (True)
        or the worker stops (False: the item is still running in the store, and is requeued
        by release_running or, after a kill, by recover)."""
        wait, longest = COMMIT_RETRY_S
        while True:
            try:
                await asyncio.to_thread(
                    self.store.finish_item, item, result=outcome.result, error=outcome.error,
                    engine_version=core.ENGINE_VERSION,
                )
                return True
            except StoreUnavailable as exc:
                log.warning("runs: item %s of run %s finished but not stored yet (%s); "
                            "retrying in %.1f s", item.item_id, item.run_id, exc.cause, wait)
            except ValueError:  # an outcome JSON cannot hold: a bug, not the disk
                log.exception("runs: item %s of run %s cannot be stored", item.item_id,
                              item.run_id)
                outcome = _failed([], "internal error (result not storable)", "internal_error")
                continue
            if self._stopping:
                return False
            await asyncio.sleep(wait)
            wait = min(2 * wait, longest)


def _finished_copy(item: ItemRecord, status: str, outcome: Outcome) -> ItemRecord:
    return replace(item, status=status, result=outcome.result,  # type: ignore[arg-type]
                   error=outcome.error, engine_version=core.ENGINE_VERSION)


# --- without a server (tailgauge run) -------------------------------------------------------


async def run_locally(
    batch: RunBatchIn, *, settings: Settings, on_start: Callable[[RunRecord], None],
    on_item: ItemCallback, kinds: Mapping[str, Kind] | None = None,
) -> RunOut:
    """Run a batch to the end with a pool of its own and an in-memory store (BatchRejected
    if the batch is malformed); returns the body GET /v1/runs/{run_id} would give."""
    metrics = Metrics()
    pool = ComputePool(kind=settings.executor, workers=settings.workers, metrics=metrics,
                       dask_scheduler=settings.dask_scheduler)
    worker = RunWorker(
        settings=settings, pool=pool, metrics=metrics, kinds=kinds, on_item=on_item,
        store_factory=lambda: SqliteRunStore(path=":memory:"),
    )
    pool.start()
    try:
        await worker.start()
        run, _ = await worker.submit(batch, idempotency_key=None)
        on_start(run)
        await worker.wait_finished(run.run_id)
        view = await worker.view(run.run_id)
        assert view is not None
        return view
    finally:
        await worker.stop()
        pool.shutdown()
