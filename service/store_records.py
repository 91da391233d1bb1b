"""Records of the run store and the ``RunStore`` interface the worker and routes use.

``owner`` is the SHA-256 hex digest of the bearer token that created a run (None when
authentication is off); a store method given an owner sees only that owner's runs.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, Literal, Protocol

from service.store_faults import Fault

RunStatus = Literal["queued", "running", "done", "failed", "cancelled"]
ItemStatus = Literal["queued", "running", "done", "failed", "cancelled"]
RUN_STATUSES: tuple[RunStatus, ...] = ("queued", "running", "done", "failed", "cancelled")
ACTIVE: tuple[RunStatus, ...] = ("queued", "running")
STORE_FILE = "runs.sqlite3"
SCHEMA_VERSION = 1


@dataclass(frozen=True)
class NewItem:
    """One item of a batch as submitted, its seed already drawn into ``request``."""

    item_id: str
    kind: str
    request: Any  # the JSON value the caller sent (a dict when well formed)
    seed: int | None  # None when the request is not valid enough to carry one


@dataclass(frozen=True)
class Progress:
    total: int
    queued: int = 0
    running: int = 0
    done: int = 0
    failed: int = 0
    cancelled: int = 0

    @property
    def finished(self) -> int:
        return self.done + self.failed


@dataclass(frozen=True)
class RunRecord:
    seq: int  # insertion order; the list cursor
    run_id: str
    name: str
    status: RunStatus
    batch_hash: str
    idempotency_key: str | None
    engine_version: str
    created_at: str
    updated_at: str
    progress: Progress
    owner: str | None = None


@dataclass(frozen=True)
class ItemRecord:
    run_id: str
    run_seq: int
    position: int
    item_id: str
    kind: str
    request: Any
    seed: int | None
    status: ItemStatus
    attempts: int
    result: dict[str, Any] | None = None
    error: list[dict[str, Any]] | None = None
    engine_version: str | None = None
    finished_at: str | None = None


@dataclass(frozen=True)
class Recovery:
    """What start-up did with the items a stopped server left running."""

    requeued: list[tuple[str, str]] = field(default_factory=list)  # (run_id, item_id)
    failed: list[tuple[str, str]] = field(default_factory=list)


class RunStore(Protocol):
    """Storage of batch runs. Every method is synchronous and commits before it returns."""

    def create_run(
        self, *, name: str, items: Sequence[NewItem], engine_version: str, batch_hash: str,
        idempotency_key: str | None, owner: str | None = None,
    ) -> tuple[RunRecord, bool]:
        """Store a new run, or return the run the same owner stored under
        ``idempotency_key`` (the bool says whether a run was created)."""
        ...

    def get_run(self, run_id: str, *, owner: str | None = None) -> RunRecord | None: ...

    def read_run(
        self, run_id: str, *, owner: str | None = None
    ) -> tuple[RunRecord, list[ItemRecord]] | None:
        """The run and every item of it in batch order, read as one consistent snapshot."""
        ...

    def list_runs(
        self, *, status: RunStatus | None, limit: int, offset: int, before_seq: int | None,
        owner: str | None = None,
    ) -> list[RunRecord]:
        """Runs, newest first."""
        ...

    def claim_next(self) -> ItemRecord | None:
        """Mark the oldest queued item running (counting an attempt) and return it."""
        ...

    def finish_item(
        self, item: ItemRecord, *, result: dict[str, Any] | None,
        error: list[dict[str, Any]] | None, engine_version: str,
    ) -> bool:
        """Commit a running item's outcome (done with ``result``, or failed with ``error``).
        False if the item was not running (the outcome is dropped, nothing is overwritten)."""
        ...

    def requeue_item(self, item: ItemRecord, *, count_attempt: bool) -> None: ...

    def cancel_run(self, run_id: str, *, owner: str | None = None) -> RunRecord | None:
        """Cancel the run's queued items; running ones may still finish."""
        ...

    def recover(self, *, max_attempts: int) -> Recovery:
        """At start-up: requeue items left running, or fail them after max_attempts."""
        ...

    def release_running(self) -> int:
        """At shutdown: put running items back in the queue without counting the attempt."""
        ...

    def probe(self) -> None:
        """A small write that needs free space, to see whether a full store has room again
        (raises StoreUnavailable when it has not)."""
        ...

    @property
    def fault(self) -> Fault | None:
        """The store's last fault still in force (None when healthy); never touches the disk."""
        ...

    @property
    def write_fault(self) -> Fault | None:
        """The last write fault still in force."""
        ...

    def close(self) -> None: ...
