"""The server's data dir: checked, locked and opened at start-up.

One server per data dir: the run store requeues at start-up every item still marked running,
which is right only if no other server is computing it. ``DataDirLock`` holds an exclusive
``flock`` on ``DATA_DIR/server.lock`` for the life of the server; a second server on the same
dir is refused with one line naming the pid that holds it. The kernel drops the lock when the
holder dies (kill -9 included), so a stale lock file never blocks a restart. The lock is per
process and counted: ``tailgauge serve`` takes it before uvicorn starts and the app's lifespan
takes it again in the same process.

Every start-up problem of the dir (a path that is a file, a read-only file system, a database
that is not one) is a ``DataDirError`` whose message names the dir and the problem in one
line; ``tailgauge serve`` prints it and exits 2, without a traceback.
"""

from __future__ import annotations

import fcntl
import os
import sqlite3
import threading
from pathlib import Path
from typing import ClassVar

from service.settings import Settings
from service.store import STORE_FILE, SqliteRunStore

LOCK_FILE = "server.lock"


class DataDirError(Exception):
    """The data dir cannot be used; the message is the one line to show."""

    def __init__(self, data_dir: Path, problem: str) -> None:
        super().__init__(f"data dir {data_dir}: {problem}")
        self.data_dir = data_dir
        self.problem = problem


class DataDirLock:
    """An exclusive lock on a data dir, shared by the holders in this process."""

    _held: ClassVar[dict[str, tuple[DataDirLock, int]]] = {}
    _guard = threading.Lock()

    def __init__(self, data_dir: Path, fd: int) -> None:
        self.data_dir = data_dir
        self._fd = fd

    @classmethod
    def acquire(cls, data_dir: Path) -> DataDirLock:
        key = os.path.realpath(data_dir)
        with cls._guard:
            if key in cls._held:
                lock, count = cls._held[key]
                cls._held[key] = (lock, count + 1)
                return lock
            lock = cls(data_dir, _lock_file(data_dir))
            cls._held[key] = (lock, 1)
            return lock

    def release(self) -> None:
        key = os.path.realpath(self.data_dir)
        with self._guard:
            lock, count = self._held.get(key, (self, 1))
            if count > 1:
                self._held[key] = (lock, count - 1)
                return
            self._held.pop(key, None)
            os.close(self._fd)  # closing the descriptor drops the flock


def _prepare(data_dir: Path) -> None:
    if data_dir.exists() and not data_dir.is_dir():
        raise DataDirError(data_dir, "is not a directory")
    try:
        data_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise DataDirError(data_dir, f"cannot be created ({exc.strerror})") from None


def _lock_file(data_dir: Path) -> int:
    _prepare(data_dir)
    path = data_dir / LOCK_FILE
    try:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise DataDirError(data_dir, f"is not writable ({exc.strerror})") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        holder = os.pread(fd, 32, 0).decode("ascii", "replace").strip() or "unknown"
        os.close(fd)
        raise DataDirError(
            data_dir, f"is in use by another tailgauge server (pid {holder}); give each "
            "server its own --data-dir"
        ) from None
    except OSError as exc:
        os.close(fd)
        raise DataDirError(data_dir, f"cannot be locked ({exc.strerror})") from None
    try:
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode("ascii"), 0)
    except OSError as exc:
        os.close(fd)
        raise DataDirError(data_dir, f"is not writable ({exc.strerror})") from None
    return fd


def open_store(settings: Settings, lock: DataDirLock) -> SqliteRunStore:
    """The run store in the locked data dir (DataDirError when it cannot be opened)."""
    path = lock.data_dir / STORE_FILE
    try:
        return SqliteRunStore(path=path, busy_timeout_s=settings.store_busy_timeout_s,
                              drill_file=settings.store_drill_file)
    except sqlite3.Error as exc:
        raise DataDirError(
            lock.data_dir, f"{STORE_FILE} cannot be opened as a run store ({exc}); move it "
            "away to start with an empty store"
        ) from None
    except OSError as exc:
        raise DataDirError(lock.data_dir, f"{STORE_FILE}: {exc.strerror}") from None


def check(settings: Settings) -> DataDirLock:
    """Lock the data dir and open and close its store once: every start-up problem shows
    here, before the server listens. The caller keeps the lock for the server's life."""
    lock = DataDirLock.acquire(settings.data_dir)
    try:
        open_store(settings, lock).close()
    except BaseException:
        lock.release()
        raise
    return lock
