"""Runs survive the server: kill -9 mid-run, restart on the same data dir, nothing lost or redone.

Also the store's own recovery rules, on a SQLite file.
"""

from __future__ import annotations

import os
import shutil
import socket
import sqlite3
import subprocess
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from service.store import STORE_FILE, NewItem, SqliteRunStore

ITEMS = 8
SLOW_SAMPLES = 600_000  # about 0.25 s per item on one core: a kill lands mid-run


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _serve(data_dir: Path, log: Path) -> tuple[subprocess.Popen[bytes], str]:
    command = shutil.which("tailgauge")
    assert command, "the tailgauge console script is not installed (pip install -e .)"
    port = _free_port()
    env = {**os.environ, "TAILGAUGE_EXECUTOR": "process", "TAILGAUGE_RUN_WORKERS": "2"}
    with log.open("ab") as out:
        process = subprocess.Popen(
            [command, "serve", "--host", "127.0.0.1", "--port", str(port),
             "--data-dir", str(data_dir), "--workers", "2"],
            stdout=out, stderr=subprocess.STDOUT, env=env,
        )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise AssertionError(f"server exited early:\n{log.read_text()}")
        try:
            if httpx.get(f"{base}/v1/health", timeout=1).status_code == 200:
                return process, base
        except httpx.TransportError:
            time.sleep(0.1)
    process.kill()
    raise AssertionError(f"server did not come up:\n{log.read_text()}")


def _request(seed: int) -> dict[str, Any]:
    return {
        "portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 20.0},
                                 "severity": {"family": "exponential", "mean": 10.0}}]},
        "thresholds": [300.0, 450.0], "method": "crude",
        "precision": {"samples": SLOW_SAMPLES}, "seed": seed,
    }


def _items_in_file(data_dir: Path) -> dict[str, tuple[str, int]]:
    """item id -> (status, attempts), read from the store file while no server runs."""
    with sqlite3.connect(data_dir / STORE_FILE) as conn:
        rows = conn.execute("SELECT item_id, status, attempts FROM items").fetchall()
    return {item_id: (status, attempts) for item_id, status, attempts in rows}


def _metric(base: str, name: str) -> float:
    text = httpx.get(f"{base}/metrics", timeout=5).text
    return sum(float(line.split()[-1]) for line in text.splitlines() if line.startswith(name))


def test_a_run_survives_kill_9_and_finishes_after_a_restart(tmp_path):
    data_dir, log = tmp_path / "data", tmp_path / "server.log"
    batch = {"name": "quarter-end", "items": [
        {"id": f"portfolio-{i:02d}", "kind": "exceedance", "request": _request(100 + i)}
        for i in range(ITEMS)]}
    process, base = _serve(data_dir, log)
    try:
        run_id = httpx.post(f"{base}/v1/runs", json=batch, timeout=10).json()["run_id"]
        deadline = time.monotonic() + 60
        while True:  # until a few items are finished and most are not
            before = httpx.get(f"{base}/v1/runs/{run_id}", timeout=5).json()
            if before["progress"]["done"] >= 3:
                break
            assert time.monotonic() < deadline, before
            time.sleep(0.05)
        process.kill()  # SIGKILL: no shutdown code runs
        process.wait()
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert before["progress"]["done"] < ITEMS, "the run ended before the kill; slow it down"
    at_kill = _items_in_file(data_dir)
    interrupted = {i for i, (status, _) in at_kill.items() if status == "running"}
    finished_at_kill = {i for i, (status, _) in at_kill.items() if status == "done"}
    assert interrupted, at_kill  # the kill caught items mid-computation

    process, base = _serve(data_dir, log)
    try:
        deadline = time.monotonic() + 60
        while (after := httpx.get(f"{base}/v1/runs/{run_id}", timeout=5).json())[
                "status"] != "done":
            assert time.monotonic() < deadline, after
            time.sleep(0.1)
        recomputed = _metric(base, "tailgauge_run_items_finished_total")
        interrupted_item = next(r for r in after["results"] if r["id"] in interrupted)
        synchronous = httpx.post(f"{base}/v1/exceedance", json=_request(
            interrupted_item["seed"]), timeout=30).json()
    finally:
        process.terminate()
        process.wait(timeout=15)

    ids = [r["id"] for r in after["results"]]
    assert ids == [item["id"] for item in batch["items"]]  # every item exactly once, in order
    assert after["progress"] == {"done": ITEMS, "total": ITEMS, "failed": 0, "running": 0,
                                 "queued": 0, "cancelled": 0}
    by_id = {r["id"]: r for r in after["results"]}
    for kept in before["results"]:  # finished before the kill: unchanged, timing included
        assert by_id[kept["id"]] == kept
    for item_id in finished_at_kill:
        assert by_id[item_id]["attempts"] == 1
    for item_id in interrupted:
        assert by_id[item_id]["attempts"] == 2
    # Only what was not finished at the kill was computed after the restart.
    assert recomputed == ITEMS - len(finished_at_kill)
    # The requeued item ran with its stored seed: the synchronous answer, figure for figure.
    strip = {"elapsed_s"}
    assert {k: v for k, v in interrupted_item["result"].items() if k not in strip} == {
        k: v for k, v in synchronous.items() if k not in strip}
    print(f"\nkill -9 with {len(finished_at_kill)} done and {len(interrupted)} running; "
          f"{int(recomputed)} computed after the restart")


# --- the store's recovery rules ---------------------------------------------------------------


@pytest.fixture
def store(tmp_path: Path) -> SqliteRunStore:
    return SqliteRunStore(path=tmp_path / STORE_FILE)


def _new_run(store: SqliteRunStore, n: int = 2) -> str:
    items = [NewItem(item_id=f"i{k}", kind="exceedance", request={"seed": k}, seed=k)
             for k in range(n)]
    run, created = store.create_run(name="r", items=items, engine_version="test",
                                    batch_hash="h", idempotency_key=None)
    assert created
    return run.run_id


def _items(store: SqliteRunStore, run_id: str) -> list[Any]:
    snapshot = store.read_run(run_id)
    assert snapshot is not None
    return snapshot[1]


def test_the_store_file_is_in_wal_mode(store):
    assert store.journal_mode == "wal"


def test_an_interrupted_item_is_requeued_then_failed_at_the_attempt_limit(store, tmp_path):
    run_id = _new_run(store, n=1)
    for attempt in (1, 2):
        item = store.claim_next()
        assert item is not None and item.attempts == attempt
        store.close()  # the server dies with the item running
        store = SqliteRunStore(path=tmp_path / STORE_FILE)
        assert store.recover(max_attempts=3).requeued == [(run_id, "i0")]
    assert store.claim_next() is not None  # third start
    store.close()
    store = SqliteRunStore(path=tmp_path / STORE_FILE)
    assert store.recover(max_attempts=3).failed == [(run_id, "i0")]
    [item] = _items(store, run_id)
    assert item.status == "failed" and item.attempts == 3
    assert item.error is not None and item.error[0]["type"] == "interrupted"
    assert "run_max_attempts" in item.error[0]["msg"]
    run = store.get_run(run_id)
    assert run is not None and run.status == "failed"


def test_a_finished_result_is_never_overwritten(store):
    run_id = _new_run(store, n=1)
    item = store.claim_next()
    assert item is not None
    assert store.finish_item(item, result={"v": 1}, error=None, engine_version="test")
    assert not store.finish_item(item, result={"v": 2}, error=None, engine_version="test")
    assert store.recover(max_attempts=1).requeued == []
    [kept] = _items(store, run_id)
    assert kept.result == {"v": 1} and kept.status == "done"


def test_a_clean_shutdown_does_not_count_the_attempt(store):
    run_id = _new_run(store, n=1)
    assert store.claim_next() is not None
    assert store.release_running() == 1
    [item] = _items(store, run_id)
    assert item.status == "queued" and item.attempts == 0


def test_an_item_running_when_its_run_was_cancelled_is_not_run_again(store):
    run_id = _new_run(store, n=2)
    assert store.claim_next() is not None
    cancelled = store.cancel_run(run_id)
    assert cancelled is not None and cancelled.progress.cancelled == 1
    store.recover(max_attempts=3)  # the server died before the running item finished
    assert [i.status for i in _items(store, run_id)] == ["cancelled", "cancelled"]
    assert store.claim_next() is None
