"""The run store's faults: disk full and database locked give 503 and a degraded health, and
no finished item is lost, duplicated or left running once the store works again.

Disk full is SQLite's own SQLITE_FULL: the drill file makes the store cap the database at its
present size (PRAGMA max_page_count), so no root, tmpfs or real full disk is needed. Busy is a
second connection holding an exclusive lock.
"""

from __future__ import annotations

import sqlite3
import time
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.store import STORE_FILE, NewItem, SqliteRunStore
from service.store_faults import StoreUnavailable

THRESHOLDS = [float(t) for t in range(20, 120, 2)]  # 50 estimates: a result needs new pages


def _request(seed: int, samples: int = 2000) -> dict[str, Any]:
    return {
        "portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 3.0},
                                 "severity": {"family": "exponential", "mean": 10.0}}]},
        "thresholds": THRESHOLDS, "method": "crude", "precision": {"samples": samples},
        "seed": seed,
    }


def _batch(n: int, samples: int = 2000) -> dict[str, Any]:
    return {"name": "fault drill", "items": [
        {"id": f"item-{i:03d}", "kind": "exceedance", "request": _request(500 + i, samples)}
        for i in range(n)]}


def _wait(condition: Any, timeout: float = 30.0, what: str = "condition") -> Any:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def _run(client: TestClient, run_id: str) -> dict[str, Any]:
    response = client.get(f"/v1/runs/{run_id}")
    assert response.status_code == 200, response.text
    body: dict[str, Any] = response.json()
    return body


def test_disk_full_gives_503_and_degraded_health_then_recovers(make_client, tmp_path):
    drill = tmp_path / "drill"
    client = make_client(store_drill_file=drill)
    assert client.get("/v1/health").json()["status"] == "ok"
    drill.write_text("full")
    refused = client.post("/v1/runs", json=_batch(20))
    # Before: 500 internal_error while health said ok.
    assert refused.status_code == 503, refused.text
    assert refused.headers["Retry-After"] == "5"
    [entry] = refused.json()["detail"]
    assert entry["type"] == "store_full" and entry["loc"] == []
    assert "full" in entry["msg"] and "nothing was stored" in entry["msg"]
    health = client.get("/v1/health").json()
    assert health["status"] == "degraded"
    assert health["store"]["status"] == "store_full" and health["store"]["since"]
    assert client.get("/v1/runs").json()["runs"] == []  # reads still work; nothing half-stored
    # Synchronous computations do not need the store.
    assert client.post("/v1/exceedance", json=_request(1)).status_code == 200

    drill.unlink()  # space is back: the worker's probe sees it within a second
    _wait(lambda: client.get("/v1/health").json()["status"] == "ok", what="health ok")
    accepted = client.post("/v1/runs", json=_batch(3))
    assert accepted.status_code == 202, accepted.text


def test_items_finished_while_the_disk_is_full_are_committed_once_space_returns(
        make_client, tmp_path):
    drill = tmp_path / "drill"
    n = 30
    client = make_client(store_drill_file=drill, workers=2)
    run_id = client.post("/v1/runs", json=_batch(n, samples=20_000)).json()["run_id"]
    _wait(lambda: _run(client, run_id)["progress"]["done"] >= 2, what="two items done")
    drill.write_text("full")
    # Items keep finishing but cannot be committed: the run stalls with items held running.
    _wait(lambda: client.get("/v1/health").json()["status"] == "degraded", what="degraded")
    stalled = _run(client, run_id)["progress"]
    time.sleep(1.5)
    assert _run(client, run_id)["progress"] == stalled  # nothing is claimed while full
    assert stalled["done"] < n and stalled["running"] >= 1, stalled

    drill.unlink()
    final = _wait(lambda: (body := _run(client, run_id))["status"] == "done" and body,
                  timeout=60, what="run done")
    # Before: the run stayed "running" at done < total for ever. After: every item once,
    # computed once (attempts 1: held results were committed, not recomputed), none stuck.
    assert final["progress"] == {"done": n, "total": n, "failed": 0, "running": 0,
                                 "queued": 0, "cancelled": 0}
    ids = [r["id"] for r in final["results"]]
    assert ids == [f"item-{i:03d}" for i in range(n)]
    assert {r["attempts"] for r in final["results"]} == {1}
    assert client.get("/v1/health").json()["status"] == "ok"
    # A held result is the synchronous endpoint's answer for the same seed.
    held = final["results"][stalled["done"]]
    synchronous = client.post("/v1/exceedance", json=_request(held["seed"], 20_000)).json()
    assert {k: v for k, v in held["result"].items() if k != "elapsed_s"} == {
        k: v for k, v in synchronous.items() if k != "elapsed_s"}


def test_a_locked_database_gives_503_store_busy_and_degraded_health(make_client, tmp_path):
    client = make_client(store_busy_timeout_s=0.2)
    path = tmp_path / "data" / STORE_FILE
    other = sqlite3.connect(path, isolation_level=None)
    other.execute("BEGIN EXCLUSIVE")  # another process holding the write lock
    try:
        refused = client.post("/v1/runs", json=_batch(2))
        assert refused.status_code == 503, refused.text
        [entry] = refused.json()["detail"]
        assert entry["type"] == "store_busy" and "locked by another process" in entry["msg"]
        health = client.get("/v1/health").json()
        assert health["status"] == "degraded" and health["store"]["status"] == "store_busy"
    finally:
        other.execute("ROLLBACK")
        other.close()
    _wait(lambda: client.get("/v1/health").json()["status"] == "ok", what="health ok")
    assert client.post("/v1/runs", json=_batch(2)).status_code == 202


def test_a_failed_commit_leaves_no_open_transaction(tmp_path: Path):
    drill = tmp_path / "drill"
    store = SqliteRunStore(path=tmp_path / STORE_FILE, drill_file=drill)
    big = {"payload": "x" * 50_000}
    drill.write_text("full")
    with pytest.raises(StoreUnavailable) as refused:
        store.create_run(name="r", items=[NewItem(item_id="a", kind="exceedance", request=big,
                                                  seed=1)],
                         engine_version="t", batch_hash="h", idempotency_key=None)
    assert refused.value.kind == "store_full"
    assert store.fault is not None and store.fault.kind == "store_full"
    with pytest.raises(StoreUnavailable):
        store.probe()
    drill.unlink()
    store.probe()  # the next transaction starts cleanly: the failed one was rolled back
    assert store.fault is None
    run, created = store.create_run(
        name="r", items=[NewItem(item_id="a", kind="exceedance", request=big, seed=1)],
        engine_version="t", batch_hash="h", idempotency_key=None)
    assert created and run.progress.total == 1
    store.close()
