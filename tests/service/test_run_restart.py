"""Runs survive the server: kill -9 mid-run, restart on the same data dir, nothing lost or redone;
a full disk mid-run, then space back: the run completes, nothing stuck.

The servers are real (``python -m uvicorn service.app:app`` on loopback, process pool). Also
the store's own recovery rules, on a SQLite file.
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import time
from pathlib import Path
from typing import Any

import httpx
import pytest
from server_processes import kill, start_server, stop

from service.store import STORE_FILE, NewItem, SqliteRunStore

ITEMS = 8
SLOW_SAMPLES = 300_000  # about 0.5 s per item on one core: a kill lands mid-run


def _serve(data_dir: Path, log: Path, **env: str) -> tuple[subprocess.Popen[bytes], str]:
    return start_server(data_dir, log, env=env)


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
        kill(process)  # SIGKILL: no shutdown code runs
    finally:
        if process.poll() is None:
            kill(process)
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
        stop(process)

    ids = [r["id"] for r in after["results"]]
    assert ids == [item["id"] for item in batch["items"]]  # every item exactly once, in order
    assert after["progress"] == {"done": ITEMS, "total": ITEMS, "failed": 0, "running": 0,
                                 "queued": 0, "cancelled": 0}
    by_id = {r["id"]: r for r in after["results"]}
    for kept in before["results"]:  # finished before the kill: byte for byte, timing included
        assert json.dumps(by_id[kept["id"]]) == json.dumps(kept)
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


def _wide_request(seed: int) -> dict[str, Any]:
    # 40 thresholds: each result needs fresh database pages, so a full store refuses it.
    return {**_request(seed), "thresholds": [float(t) for t in range(200, 600, 10)],
            "precision": {"samples": SLOW_SAMPLES // 4}}


def _until(what: str, condition: Any, timeout: float = 60.0) -> Any:
    deadline = time.monotonic() + timeout
    while not (value := condition()):
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.1)
    return value


def test_a_full_disk_mid_run_then_space_back_completes_the_run_with_nothing_stuck(tmp_path):
    data_dir, log, drill = tmp_path / "data", tmp_path / "server.log", tmp_path / "drill"
    items = 12
    batch = {"name": "disk-full drill", "items": [
        {"id": f"line-{i:02d}", "kind": "exceedance", "request": _wide_request(300 + i)}
        for i in range(items)]}
    process, base = _serve(data_dir, log, TAILGAUGE_STORE_DRILL_FILE=str(drill))

    def run() -> dict[str, Any]:
        body: dict[str, Any] = httpx.get(f"{base}/v1/runs/{run_id}", timeout=10).json()
        return body

    def health() -> dict[str, Any]:
        body: dict[str, Any] = httpx.get(f"{base}/v1/health", timeout=5).json()
        return body

    try:
        run_id = httpx.post(f"{base}/v1/runs", json=batch, timeout=10).json()["run_id"]
        _until("two items done", lambda: run()["progress"]["done"] >= 2)
        drill.write_text("full")  # the disk fills up mid-run
        _until("degraded health", lambda: health()["status"] == "degraded")
        assert health()["store"]["status"] == "store_full"
        refused = httpx.post(f"{base}/v1/runs", json=batch, timeout=10)
        assert refused.status_code == 503 and refused.json()["detail"][0]["type"] == \
            "store_full", refused.text
        stalled = run()["progress"]
        time.sleep(1.0)  # items take about 0.3 s each: several would have finished by now
        assert run()["progress"] == stalled and stalled["done"] < items, stalled
        kept = {r["id"]: json.dumps(r) for r in run()["results"]}

        drill.unlink()  # space is back
        final = _until("run done", lambda: (body := run())["status"] == "done" and body)
        assert health()["status"] == "ok"
        listed = httpx.get(f"{base}/v1/runs", timeout=10).json()["runs"]
    finally:
        stop(process)
    # Every item once, in order, computed once; nothing running or queued; no run stuck.
    assert [r["id"] for r in final["results"]] == [item["id"] for item in batch["items"]]
    assert final["progress"] == {"done": items, "total": items, "failed": 0, "running": 0,
                                 "queued": 0, "cancelled": 0}
    assert {r["attempts"] for r in final["results"]} == {1}
    assert [r["status"] for r in listed] == ["done"]  # the refused batch stored nothing
    by_id = {r["id"]: r for r in final["results"]}
    for item_id, text in kept.items():  # finished before the disk filled: byte for byte
        assert json.dumps(by_id[item_id]) == text
    assert not [i for i, (status, _) in _items_in_file(data_dir).items() if status != "done"]
    print(f"\ndisk full at {stalled['done']}/{items} done ({stalled['running']} held "
          f"running); after space came back {items}/{items} done, attempts all 1")


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
