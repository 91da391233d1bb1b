"""Faults of the run store: what a failed disk operation means to a caller, and the store's
health as the last operations found it.

SQLite reports a full disk (or a database at its page cap) as ``SQLITE_FULL`` and another
process holding the lock past the busy timeout as ``SQLITE_BUSY``/``SQLITE_LOCKED``. Both are
conditions of the server, not of the request: the caller gets a 503 whose entry says what
happened, and ``GET /v1/health`` reports ``degraded`` until the store works again.

``StoreHealth`` keeps the last write fault and the last read fault apart: a read that works on
a full disk says nothing about whether the next write will. It is read by the health route
without touching the disk (health never waits for the store).

``DrillHook`` is the fault drill's switch: a file named by ``TAILGAUGE_STORE_DRILL_FILE``
holding ``full`` caps the database at its present size (``PRAGMA max_page_count``), so the
next write that needs a page fails with SQLite's own ``SQLITE_FULL``; removing the file lifts
the cap. It lets a test fill the disk of a running server from outside without root.
"""

from __future__ import annotations

import sqlite3
import threading
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Literal

from service.errors import ComputationUnavailable

FaultKind = Literal["store_full", "store_busy", "store_error"]
RETRY_AFTER_S = 5

_CODES: dict[int, FaultKind] = {
    sqlite3.SQLITE_FULL: "store_full",
    sqlite3.SQLITE_BUSY: "store_busy",
    sqlite3.SQLITE_LOCKED: "store_busy",
    sqlite3.SQLITE_IOERR: "store_error",
    sqlite3.SQLITE_READONLY: "store_error",
    sqlite3.SQLITE_CANTOPEN: "store_error",
    sqlite3.SQLITE_CORRUPT: "store_error",
    sqlite3.SQLITE_NOTADB: "store_error",
}
_MESSAGES: dict[FaultKind, str] = {
    "store_full": "the run store cannot write: the server's disk (or its database size cap) "
    "is full; nothing was stored, retry once space is freed",
    "store_busy": "the run store is locked by another process (another server or a backup on "
    "the same data dir) past the busy timeout; nothing was stored, retry later",
    "store_error": "the run store could not be read or written (disk or database error); "
    "nothing was stored, retry later",
}


class StoreUnavailable(ComputationUnavailable):
    """The run store refused an operation for a reason of the server's: a 503."""

    def __init__(self, kind: FaultKind, cause: str) -> None:
        super().__init__((), _MESSAGES[kind], kind)
        self.fault_kind: FaultKind = kind
        self.cause = cause  # SQLite's own words, for the log only


def classify(exc: sqlite3.Error) -> StoreUnavailable | None:
    """The fault an SQLite error stands for, or None when it is a bug (bad SQL, bad value)."""
    code = getattr(exc, "sqlite_errorcode", None)
    if code is None:
        return None
    kind = _CODES.get(code & 0xFF)  # extended codes keep the primary code in the low byte
    return None if kind is None else StoreUnavailable(kind, str(exc))


@dataclass(frozen=True)
class Fault:
    kind: FaultKind
    message: str
    since: str  # ISO time of the first failure in a row


class StoreHealth:
    """The last read and write outcome of the store (thread-safe; never touches the disk)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._write: Fault | None = None
        self._read: Fault | None = None

    def record(self, *, write: bool, fault: StoreUnavailable | None) -> None:
        with self._lock:
            previous = self._write if write else self._read
            if fault is None:
                new = None
            elif previous is not None and previous.kind == fault.fault_kind:
                new = previous  # the same fault goes on: keep when it started
            else:
                new = Fault(fault.fault_kind, fault.message,
                            datetime.now(UTC).isoformat(timespec="seconds"))
            if write:
                self._write = new
            else:
                self._read = new

    @property
    def fault(self) -> Fault | None:
        with self._lock:
            return self._write or self._read

    @property
    def write_fault(self) -> Fault | None:
        with self._lock:
            return self._write


class DrillHook:
    """Fault drill: while ``path`` holds ``full``, the database may not grow."""

    UNCAPPED = 4294967294  # SQLite's largest max_page_count

    def __init__(self, path: Path | None) -> None:
        self.path = path
        self._capped = False

    def apply(self, conn: sqlite3.Connection) -> None:
        if self.path is None:
            return
        try:
            want = self.path.read_text(encoding="utf-8").strip() == "full"
        except OSError:
            want = False
        if want and not self._capped:
            pages = int(conn.execute("PRAGMA page_count").fetchone()[0])
            conn.execute(f"PRAGMA max_page_count = {pages}")
        elif not want and self._capped:
            conn.execute(f"PRAGMA max_page_count = {self.UNCAPPED}")
        self._capped = want
