"""The data dir at start-up: one server per dir, and every problem in one line, exit 2.

Before: a second server on the same dir requeued and recomputed the first one's running item;
a read-only dir, a file or a corrupt database printed a 67-line traceback.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import httpx
import pytest
from server_processes import ROOT, environment, free_port, run_module, start_server, stop

from service.datadir import LOCK_FILE, DataDirError, DataDirLock
from service.store import STORE_FILE


def _serve(data_dir: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return run_module(["service.cli", "serve", "--port", str(free_port()),
                       "--data-dir", str(data_dir), *extra], timeout=60)


def _one_line(result: subprocess.CompletedProcess[str]) -> str:
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert result.returncode == 2, (result.returncode, result.stderr)
    assert "Traceback" not in result.stderr and len(lines) == 1, result.stderr
    return lines[0]


def test_a_data_dir_that_is_a_file_is_one_line_and_exit_2(tmp_path):
    path = tmp_path / "data"
    path.write_text("not a directory")
    line = _one_line(_serve(path))
    assert line == f"tailgauge serve: data dir {path}: is not a directory"


def test_a_corrupt_store_is_one_line_and_exit_2(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    (data / STORE_FILE).write_bytes(b"this is not an SQLite database " * 100)
    line = _one_line(_serve(data))
    assert line.startswith(f"tailgauge serve: data dir {data}: {STORE_FILE} cannot be opened")
    assert "file is not a database" in line and "move it away" in line


def test_a_read_only_data_dir_is_one_line_and_exit_2(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    if os.geteuid() != 0:
        data.chmod(0o555)
        result = _serve(data)
        data.chmod(0o755)
    else:
        # root writes through permission bits; a read-only mount stops it (a private mount
        # namespace: nothing outside this command sees the mount).
        assert shutil.which("unshare"), "util-linux unshare is needed for this drill as root"
        script = (f'mount --bind "{data}" "{data}" && mount -o remount,bind,ro "{data}" && '
                  f'exec "{sys.executable}" -m service.cli serve --port {free_port()} '
                  f'--data-dir "{data}"')
        result = subprocess.run(["unshare", "-m", "sh", "-c", script], cwd=ROOT,
                                env=environment(), capture_output=True, text=True, timeout=60,
                                check=False)
    line = _one_line(result)
    assert line.startswith(f"tailgauge serve: data dir {data}: is not writable (")
    assert "Read-only file system" in line or "Permission denied" in line


def test_the_data_dir_lock_is_taken_once_per_process_and_released(tmp_path):
    first = DataDirLock.acquire(tmp_path)
    second = DataDirLock.acquire(tmp_path)  # the app's lifespan inside `tailgauge serve`
    assert second is first
    second.release()
    probe = subprocess.run(
        [sys.executable, "-c", "import fcntl, sys; f = open(sys.argv[1]); "
         "fcntl.flock(f, fcntl.LOCK_EX | fcntl.LOCK_NB)", str(tmp_path / LOCK_FILE)],
        capture_output=True, text=True, check=False)
    assert probe.returncode != 0 and "BlockingIOError" in probe.stderr  # still held
    first.release()
    again = DataDirLock.acquire(tmp_path)  # free again
    again.release()


def _slow_request(seed: int) -> dict[str, Any]:
    return {
        "portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 20.0},
                                 "severity": {"family": "exponential", "mean": 10.0}}]},
        "thresholds": [300.0], "method": "crude", "precision": {"samples": 2_000_000},
        "seed": seed,
    }


def test_a_second_server_on_the_same_data_dir_is_refused(tmp_path):
    data, log = tmp_path / "data", tmp_path / "first.log"
    first, base = start_server(data, log, workers=1, via_cli=True)
    try:
        batch = {"name": "long", "items": [
            {"id": f"p{i}", "kind": "exceedance", "request": _slow_request(7 + i)}
            for i in range(2)]}
        run_id = httpx.post(f"{base}/v1/runs", json=batch, timeout=10).json()["run_id"]
        deadline = time.monotonic() + 30
        while httpx.get(f"{base}/v1/runs/{run_id}", timeout=5).json()[
                "progress"]["running"] == 0:
            assert time.monotonic() < deadline
            time.sleep(0.05)
        line = _one_line(_serve(data))
        assert line == (f"tailgauge serve: data dir {data}: is in use by another tailgauge "
                        f"server (pid {first.pid}); give each server its own --data-dir")
        # A bare ASGI server on the same dir is refused the same way (after its own banner).
        bare = run_module(["uvicorn", "service.app:app", "--port", str(free_port())],
                          env={"TAILGAUGE_DATA_DIR": str(data)}, timeout=60)
        assert bare.returncode == 2 and "Traceback" not in bare.stderr, bare.stderr
        assert f"tailgauge: cannot start: data dir {data}: is in use" in bare.stderr
        deadline = time.monotonic() + 60
        while (run := httpx.get(f"{base}/v1/runs/{run_id}", timeout=5).json())[
                "status"] != "done":
            assert time.monotonic() < deadline, run
            time.sleep(0.1)
    finally:
        stop(first)
    # The first server's items ran once: nothing was requeued behind its back.
    assert [r["attempts"] for r in run["results"]] == [1, 1]
    with sqlite3.connect(data / STORE_FILE) as conn:
        assert conn.execute("SELECT COUNT(*) FROM items WHERE status = 'running'").fetchone() \
            == (0,)


def test_an_app_in_process_raises_the_data_dir_error_and_shares_its_own_lock(
        make_settings, tmp_path):
    from fastapi.testclient import TestClient

    from service.app import create_app

    settings = make_settings()
    held = DataDirLock.acquire(settings.data_dir)  # as `tailgauge serve` holds it
    try:
        with TestClient(create_app(settings)) as client:  # the same process: shared
            assert client.get("/v1/health").status_code == 200
    finally:
        held.release()
    blocker = tmp_path / "blocker"
    blocker.write_text("x")
    with pytest.raises(DataDirError, match="is not a directory"), TestClient(
            create_app(make_settings(data_dir=blocker))):
        pass
