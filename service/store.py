"""The run store: batches, their items and every finished result, kept durably.

``RunStore`` is the interface the worker and the routes use; ``SqliteRunStore`` is the default
(stdlib sqlite3, one file in the data dir, WAL journal). A server database can replace it by
implementing the same methods.

Every state change is one transaction: an item is claimed (queued -> running, attempt
counted) in one, and its result is committed in another as soon as it finishes, so a crash
loses at most the work in progress, never a finished result. ``synchronous=FULL`` makes each
commit reach the disk before the call returns (power loss included, not just a killed
process).

The store assumes one server per data dir (``service.datadir`` holds a lock on it): at
start-up every item still marked running belongs to a server that is gone.

Faults: every SQLite error that is a condition of the server (disk full, database locked by
another process past the busy timeout, I/O error) is raised as ``StoreUnavailable`` (a 503
for HTTP callers) after the transaction is rolled back, and recorded in ``StoreHealth`` so
that ``/v1/health`` reports it; the next operation of the same kind that works clears it.
"""

from __future__ import annotations

import json
import sqlite3
import threading
import uuid
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from service.store_faults import DrillHook, Fault, StoreHealth, classify
from service.store_records import (
    ACTIVE,
    RUN_STATUSES,
    ItemRecord,
    ItemStatus,
    NewItem,
    Progress,
    Recovery,
    RunRecord,
    RunStatus,
    RunStore,
)

__all__ = [
    "ACTIVE", "RUN_STATUSES", "SCHEMA_VERSION", "STORE_FILE", "ItemRecord", "ItemStatus",
    "NewItem", "Progress", "Recovery", "RunRecord", "RunStatus", "RunStore", "SqliteRunStore",
]

STORE_FILE = "runs.sqlite3"
SCHEMA_VERSION = 2  # 2: runs.owner


_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    run_id TEXT NOT NULL UNIQUE,
    name TEXT NOT NULL,
    status TEXT NOT NULL,
    batch_hash TEXT NOT NULL,
    idempotency_key TEXT UNIQUE,
    engine_version TEXT NOT NULL,
    created_at TEXT NOT NULL,
    updated_at TEXT NOT NULL,
    owner TEXT
);
CREATE INDEX IF NOT EXISTS runs_by_status ON runs (status, seq);
CREATE TABLE IF NOT EXISTS items (
    run_seq INTEGER NOT NULL REFERENCES runs (seq),
    position INTEGER NOT NULL,
    item_id TEXT NOT NULL,
    kind TEXT NOT NULL,
    request TEXT NOT NULL,
    seed INTEGER,
    status TEXT NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 0,
    result TEXT,
    error TEXT,
    engine_version TEXT,
    started_at TEXT,
    finished_at TEXT,
    PRIMARY KEY (run_seq, position)
);
CREATE INDEX IF NOT EXISTS items_queue ON items (status, run_seq, position);
CREATE TABLE IF NOT EXISTS probe (id INTEGER PRIMARY KEY, payload BLOB);
"""
PROBE_BYTES = 64 * 1024  # room the probe asks for: more than one finished result needs

_RUN_COLUMNS = (
    "seq, run_id, name, status, batch_hash, idempotency_key, engine_version, created_at, "
    "updated_at, owner"
)
# A run is visible to its owner, and to everyone while authentication is off (owner None).
_OWNED = "(:owner IS NULL OR owner = :owner)"
_ITEM_COLUMNS = (
    "r.run_id, i.run_seq, i.position, i.item_id, i.kind, i.request, i.seed, i.status, "
    "i.attempts, i.result, i.error, i.engine_version, i.finished_at"
)
_INTERRUPTED = "interrupted"


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


def _dumps(value: Any) -> str:
    # Compact and exact: floats round-trip through repr; NaN never gets here (refused earlier).
    return json.dumps(value, separators=(",", ":"), allow_nan=False)


def _loads(text: str | None) -> Any:
    return None if text is None else json.loads(text)


class SqliteRunStore:
    """``RunStore`` on one SQLite file (``":memory:"`` for a throw-away store).

    One connection, serialised by a lock, so the store can be called from worker threads
    (the service calls it through ``asyncio.to_thread`` to keep the event loop free).
    """

    def __init__(
        self, *, path: Path | str, busy_timeout_s: float = 5.0, drill_file: Path | None = None
    ) -> None:
        self.path = str(path)
        self._lock = threading.Lock()
        self._health = StoreHealth()
        self._drill = DrillHook(drill_file)
        # Opening errors (not a database, unreadable) are the caller's to report: raw here.
        self._conn = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False)
        try:
            self._conn.execute(f"PRAGMA busy_timeout = {int(busy_timeout_s * 1000)}")
            self._conn.execute("PRAGMA journal_mode = WAL")  # readers never wait for the writer
            self._conn.execute("PRAGMA synchronous = FULL")  # a commit is on disk when it returns
            self._conn.execute("PRAGMA foreign_keys = ON")
            with self._transaction() as conn:
                # executescript would commit by itself; run the statements inside this one.
                for statement in filter(str.strip, _SCHEMA.split(";")):
                    conn.execute(statement)
                columns = {row[1] for row in conn.execute("PRAGMA table_info(runs)")}
                if "owner" not in columns:  # a store written by schema version 1
                    conn.execute("ALTER TABLE runs ADD COLUMN owner TEXT")
                conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        except BaseException:
            self._conn.close()
            raise

    @property
    def journal_mode(self) -> str:
        with self._reading() as conn:
            return str(conn.execute("PRAGMA journal_mode").fetchone()[0])

    @property
    def fault(self) -> Fault | None:
        return self._health.fault

    @property
    def write_fault(self) -> Fault | None:
        return self._health.write_fault

    @contextmanager
    def _faults(self, *, write: bool) -> Iterator[None]:
        """Turn the server's SQLite faults into StoreUnavailable and keep the health record."""
        try:
            yield
        except sqlite3.Error as exc:
            fault = classify(exc)
            self._health.record(write=write, fault=fault)
            if fault is None:
                raise
            raise fault from exc
        self._health.record(write=write, fault=None)

    @contextmanager
    def _reading(self) -> Iterator[sqlite3.Connection]:
        with self._lock, self._faults(write=False):
            yield self._conn

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        with self._lock, self._faults(write=True):
            self._drill.apply(self._conn)
            # IMMEDIATE takes the write lock up front: no other writer can slip in between
            # this transaction's reads and writes.
            self._conn.execute("BEGIN IMMEDIATE")
            try:
                yield self._conn
                self._conn.execute("COMMIT")  # a full disk may refuse the commit itself
            except BaseException:
                # SQLite may already have rolled back (SQLITE_FULL can end the transaction).
                if self._conn.in_transaction:
                    self._conn.execute("ROLLBACK")
                raise

    def probe(self) -> None:
        with self._transaction() as conn:
            # Allocates fresh pages (fails while full), then frees them in the same commit.
            conn.execute("INSERT OR REPLACE INTO probe (id, payload) VALUES (1, zeroblob(?))",
                         (PROBE_BYTES,))
            conn.execute("DELETE FROM probe")

    # --- runs -----------------------------------------------------------------------------

    def create_run(
        self, *, name: str, items: Sequence[NewItem], engine_version: str, batch_hash: str,
        idempotency_key: str | None, owner: str | None = None,
    ) -> tuple[RunRecord, bool]:
        # Keys are per owner: the stored key is prefixed by the owner's token digest.
        key = None if idempotency_key is None else (
            idempotency_key if owner is None else f"{owner}:{idempotency_key}")
        with self._transaction() as conn:
            if key is not None:
                row = conn.execute(
                    f"SELECT {_RUN_COLUMNS} FROM runs WHERE idempotency_key = ?", (key,)
                ).fetchone()
                if row is not None:
                    return self._run(conn, row), False
            now = _now()
            cursor = conn.execute(
                "INSERT INTO runs (run_id, name, status, batch_hash, idempotency_key, "
                "engine_version, created_at, updated_at, owner) "
                "VALUES (?, ?, 'queued', ?, ?, ?, ?, ?, ?)",
                (uuid.uuid4().hex, name, batch_hash, key, engine_version, now, now, owner),
            )
            seq = int(cursor.lastrowid or 0)
            conn.executemany(
                "INSERT INTO items (run_seq, position, item_id, kind, request, seed, status) "
                "VALUES (?, ?, ?, ?, ?, ?, 'queued')",
                [
                    (seq, position, item.item_id, item.kind, _dumps(item.request), item.seed)
                    for position, item in enumerate(items)
                ],
            )
            return self._run_by_seq(conn, seq), True

    def get_run(self, run_id: str, *, owner: str | None = None) -> RunRecord | None:
        with self._reading() as conn:
            row = conn.execute(
                f"SELECT {_RUN_COLUMNS} FROM runs WHERE run_id = :run_id AND {_OWNED}",
                {"run_id": run_id, "owner": owner},
            ).fetchone()
            return None if row is None else self._run(conn, row)

    def read_run(
        self, run_id: str, *, owner: str | None = None
    ) -> tuple[RunRecord, list[ItemRecord]] | None:
        with self._reading() as conn:
            # One read transaction: the progress counts and the items agree.
            conn.execute("BEGIN")
            try:
                row = conn.execute(
                    f"SELECT {_RUN_COLUMNS} FROM runs WHERE run_id = :run_id AND {_OWNED}",
                    {"run_id": run_id, "owner": owner},
                ).fetchone()
                if row is None:
                    return None
                rows = conn.execute(
                    f"SELECT {_ITEM_COLUMNS} FROM items i JOIN runs r ON r.seq = i.run_seq "
                    "WHERE i.run_seq = ? ORDER BY i.position",
                    (row[0],),
                ).fetchall()
                return self._run(conn, row), [_item(r) for r in rows]
            finally:
                if conn.in_transaction:
                    conn.execute("COMMIT")

    def list_runs(
        self, *, status: RunStatus | None, limit: int, offset: int, before_seq: int | None,
        owner: str | None = None,
    ) -> list[RunRecord]:
        with self._reading() as conn:
            rows = conn.execute(
                f"SELECT {_RUN_COLUMNS} FROM runs WHERE (:status IS NULL OR status = :status) "
                f"AND (:before IS NULL OR seq < :before) AND {_OWNED} "
                "ORDER BY seq DESC LIMIT :limit OFFSET :offset",
                {"status": status, "before": before_seq, "owner": owner, "limit": limit,
                 "offset": offset},
            ).fetchall()
            return [self._run(conn, row) for row in rows]

    def cancel_run(self, run_id: str, *, owner: str | None = None) -> RunRecord | None:
        with self._transaction() as conn:
            row = conn.execute(
                f"SELECT seq, status FROM runs WHERE run_id = :run_id AND {_OWNED}",
                {"run_id": run_id, "owner": owner},
            ).fetchone()
            if row is None:
                return None
            seq, status = row
            if status in ACTIVE:
                now = _now()
                conn.execute(
                    "UPDATE items SET status = 'cancelled', finished_at = ? "
                    "WHERE run_seq = ? AND status = 'queued'",
                    (now, seq),
                )
                conn.execute(
                    "UPDATE runs SET status = 'cancelled', updated_at = ? WHERE seq = ?",
                    (now, seq),
                )
            return self._run_by_seq(conn, seq)

    # --- the queue ------------------------------------------------------------------------

    def claim_next(self) -> ItemRecord | None:
        with self._transaction() as conn:
            row = conn.execute(
                "SELECT run_seq, position FROM items WHERE status = 'queued' "
                "ORDER BY run_seq, position LIMIT 1"
            ).fetchone()
            if row is None:
                return None
            conn.execute(
                "UPDATE items SET status = 'running', attempts = attempts + 1, started_at = ? "
                "WHERE run_seq = ? AND position = ?",
                (_now(), *row),
            )
            self._refresh(conn, row[0])
            return _item(conn.execute(
                f"SELECT {_ITEM_COLUMNS} FROM items i JOIN runs r ON r.seq = i.run_seq "
                "WHERE i.run_seq = ? AND i.position = ?",
                row,
            ).fetchone())

    def finish_item(
        self, item: ItemRecord, *, result: dict[str, Any] | None,
        error: list[dict[str, Any]] | None, engine_version: str,
    ) -> bool:
        status = "done" if error is None else "failed"
        with self._transaction() as conn:
            changed = conn.execute(
                "UPDATE items SET status = ?, result = ?, error = ?, engine_version = ?, "
                "finished_at = ? WHERE run_seq = ? AND position = ? AND status = 'running'",
                (status, None if result is None else _dumps(result),
                 None if error is None else _dumps(error), engine_version, _now(),
                 item.run_seq, item.position),
            ).rowcount
            self._refresh(conn, item.run_seq)
        return changed == 1

    def requeue_item(self, item: ItemRecord, *, count_attempt: bool) -> None:
        with self._transaction() as conn:
            conn.execute(
                "UPDATE items SET status = 'queued', attempts = attempts - ? "
                "WHERE run_seq = ? AND position = ? AND status = 'running'",
                (0 if count_attempt else 1, item.run_seq, item.position),
            )
            self._drop_queued_of_cancelled(conn)
            self._refresh(conn, item.run_seq)

    def recover(self, *, max_attempts: int) -> Recovery:
        with self._transaction() as conn:
            rows = conn.execute(
                "SELECT r.run_id, i.item_id, i.run_seq, i.position, i.attempts FROM items i "
                "JOIN runs r ON r.seq = i.run_seq WHERE i.status = 'running'"
            ).fetchall()
            recovery = Recovery()
            for run_id, item_id, seq, position, attempts in rows:
                if attempts >= max_attempts:
                    error = [_interrupted_error(attempts)]
                    conn.execute(
                        "UPDATE items SET status = 'failed', error = ?, finished_at = ? "
                        "WHERE run_seq = ? AND position = ?",
                        (_dumps(error), _now(), seq, position),
                    )
                    recovery.failed.append((run_id, item_id))
                else:
                    conn.execute(
                        "UPDATE items SET status = 'queued' WHERE run_seq = ? AND position = ?",
                        (seq, position),
                    )
                    recovery.requeued.append((run_id, item_id))
            self._drop_queued_of_cancelled(conn)
            for seq in {row[2] for row in rows}:
                self._refresh(conn, seq)
        return recovery

    def release_running(self) -> int:
        with self._transaction() as conn:
            seqs = [row[0] for row in conn.execute(
                "SELECT DISTINCT run_seq FROM items WHERE status = 'running'"
            ).fetchall()]
            released = conn.execute(
                "UPDATE items SET status = 'queued', attempts = attempts - 1 "
                "WHERE status = 'running'"
            ).rowcount
            self._drop_queued_of_cancelled(conn)
            for seq in seqs:
                self._refresh(conn, seq)
        return int(released)

    def close(self) -> None:
        with self._lock:
            self._conn.close()

    # --- helpers --------------------------------------------------------------------------

    @staticmethod
    def _drop_queued_of_cancelled(conn: sqlite3.Connection) -> None:
        # An item that was running when its run was cancelled is not run again.
        conn.execute(
            "UPDATE items SET status = 'cancelled', finished_at = ? WHERE status = 'queued' "
            "AND run_seq IN (SELECT seq FROM runs WHERE status = 'cancelled')",
            (_now(),),
        )

    @staticmethod
    def _progress(conn: sqlite3.Connection, seq: int) -> Progress:
        counts = dict(conn.execute(
            "SELECT status, COUNT(*) FROM items WHERE run_seq = ? GROUP BY status", (seq,)
        ).fetchall())
        return Progress(total=sum(counts.values()), **counts)

    def _run(self, conn: sqlite3.Connection, row: tuple[Any, ...]) -> RunRecord:
        seq, run_id, name, status, batch_hash, key, engine_version, created, updated, owner = row
        return RunRecord(
            seq=seq, run_id=run_id, name=name, status=status, batch_hash=batch_hash,
            idempotency_key=key, engine_version=engine_version, created_at=created,
            updated_at=updated, progress=self._progress(conn, seq), owner=owner,
        )

    def _run_by_seq(self, conn: sqlite3.Connection, seq: int) -> RunRecord:
        row = conn.execute(f"SELECT {_RUN_COLUMNS} FROM runs WHERE seq = ?", (seq,)).fetchone()
        return self._run(conn, row)

    def _refresh(self, conn: sqlite3.Connection, seq: int) -> None:
        """Derive the run's status from its items (a cancelled run stays cancelled)."""
        status = conn.execute("SELECT status FROM runs WHERE seq = ?", (seq,)).fetchone()[0]
        if status == "cancelled":
            new = status
        else:
            p = self._progress(conn, seq)
            started = conn.execute(
                "SELECT EXISTS (SELECT 1 FROM items WHERE run_seq = ? AND attempts > 0)", (seq,)
            ).fetchone()[0]
            if p.queued + p.running == 0:
                new = "failed" if p.failed else "done"
            else:
                new = "running" if started else "queued"
        conn.execute(
            "UPDATE runs SET status = ?, updated_at = ? WHERE seq = ?", (new, _now(), seq)
        )


def _item(row: tuple[Any, ...]) -> ItemRecord:
    (run_id, seq, position, item_id, kind, request, seed, status, attempts, result, error,
     engine_version, finished_at) = row
    return ItemRecord(
        run_id=run_id, run_seq=seq, position=position, item_id=item_id, kind=kind,
        request=_loads(request), seed=seed, status=status, attempts=attempts,
        result=_loads(result), error=_loads(error), engine_version=engine_version,
        finished_at=finished_at,
    )


def _interrupted_error(attempts: int) -> dict[str, Any]:
    return {
        "loc": ["body"],
        "msg": f"not finished after {attempts} attempts: the server stopped while the item "
        "was running each time (server limit run_max_attempts)",
        "type": _INTERRUPTED,
    }
