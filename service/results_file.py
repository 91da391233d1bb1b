"""Where ``tailgauge run --out`` writes: opened before any work, written once at the end.

The output is checked (and its temporary file created, or the device opened) before the
batch runs, so an unwritable ``--out`` costs nothing; a failure at the end removes what was
half-written. How it is written depends on what ``--out`` names, after following symlinks:

- a new path or a regular file: a temporary file in the same directory, renamed over the
  target, so a reader (the next job in the schedule) sees the old file or the whole new one;
  an existing file keeps its permission bits;
- a symlink: the same, on the file it points to; the link itself stays a link;
- a character or block device, or a FIFO (``/dev/stdout``, a pipe to another job): written
  in place (nothing to rename over; a FIFO is opened before the run, so it waits for its
  reader then);
- a directory or a socket: refused.
"""

from __future__ import annotations

import contextlib
import json
import os
import stat
import tempfile
from pathlib import Path
from typing import IO, Any


class OutputError(Exception):
    """The results cannot be written there; the message says why, in a few words."""


class ResultsFile:
    """The output of one run, prepared by ``open`` and finished by ``write`` or ``discard``."""

    def __init__(self, given: Path, target: Path, handle: IO[str], temporary: Path | None,
                 mode: int | None) -> None:
        self.given = given
        self.target = target
        self._handle = handle
        self._temporary = temporary  # None: written in place
        self._mode = mode

    @classmethod
    def open(cls, given: Path) -> ResultsFile:
        target = Path(os.path.realpath(given))  # follows symlinks, dangling ones included
        try:
            info = target.stat()
        except FileNotFoundError:
            info = None
        except OSError as exc:
            raise OutputError(exc.strerror or str(exc)) from None
        if info is not None and stat.S_ISDIR(info.st_mode):
            raise OutputError("it is a directory")
        if info is not None and stat.S_ISSOCK(info.st_mode):
            raise OutputError("it is a socket")
        try:
            if info is not None and not stat.S_ISREG(info.st_mode):  # device, FIFO
                return cls(given, target, target.open("w", encoding="utf-8"), None, None)
            target.parent.mkdir(parents=True, exist_ok=True)
            fd, temporary = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.")
        except OSError as exc:
            raise OutputError(exc.strerror or str(exc)) from None
        mode = stat.S_IMODE(info.st_mode) if info is not None else _default_mode()
        return cls(given, target, os.fdopen(fd, "w", encoding="utf-8"), Path(temporary), mode)

    @property
    def in_place(self) -> bool:
        return self._temporary is None

    def write(self, body: dict[str, Any] | str) -> None:
        """Write the body (a dict as indented JSON, a str as it is) and put it in place
        (OutputError on failure, nothing half-written left where a rename was possible)."""
        try:
            if isinstance(body, str):
                self._handle.write(body)
            else:
                json.dump(body, self._handle, indent=2, allow_nan=False)
                self._handle.write("\n")
            self._handle.flush()
            if self._temporary is not None:
                os.fsync(self._handle.fileno())
            self._handle.close()
            if self._temporary is not None:
                assert self._mode is not None
                os.chmod(self._temporary, self._mode)
                os.replace(self._temporary, self.target)
                self._temporary = None
        except OSError as exc:
            self.discard()
            raise OutputError(exc.strerror or str(exc)) from None

    def discard(self) -> None:
        """Nothing will be written: close, and remove the temporary file."""
        with contextlib.suppress(OSError):
            self._handle.close()
        if self._temporary is not None:
            with contextlib.suppress(OSError):
                self._temporary.unlink()
            self._temporary = None


def _default_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask
