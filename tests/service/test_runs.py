"""/v1/runs end to end (thread pool): batches, results, validation, cancel, idempotency, paging."""

from __future__ import annotations

import copy
import json
import math
import time
from typing import Any

from api_calls import wait_for_run
from fastapi.testclient import TestClient
from scipy import stats

import core
from service.resources import KINDS
from service.settings import DEFAULT_EXAMPLES_DIR

EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"


def _endpoint(kind: str) -> str:
    return "/v1/" + kind.replace("_", "-")  # risk_measures -> /v1/risk-measures


def _without_timing(body: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in body.items() if k != "elapsed_s"}


def _exceedance(seed: int, samples: int = 200, **extra: Any) -> dict[str, Any]:
    return {
        "portfolio": {"lines": [{"count": {"kind": "fixed", "n": 3},
                                 "severity": {"family": "exponential", "mean": 10.0}}]},
        "thresholds": [50.0], "method": "crude", "precision": {"samples": samples},
        "seed": seed, **extra,
    }


def _batch(items: list[tuple[str, str, Any]], name: str = "test batch") -> dict[str, Any]:
    return {"name": name, "items": [{"id": i, "kind": k, "request": r} for i, k, r in items]}


def test_example_batch_results_equal_the_synchronous_endpoints(client):
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    accepted = client.post("/v1/runs", json=batch)
    assert accepted.status_code == 202, accepted.text
    assert set(accepted.json()) == {"run_id", "status"}
    run_id = accepted.json()["run_id"]
    run = wait_for_run(client, run_id)
    assert run["status"] == "done" and run["name"] == batch["name"]
    assert run["progress"]["done"] == run["progress"]["total"] == len(batch["items"])
    assert [r["id"] for r in run["results"]] == [item["id"] for item in batch["items"]]
    stored = client.get(f"/v1/runs/{run_id}/batch").json()
    for item, kept, result in zip(batch["items"], stored["items"], run["results"], strict=True):
        # The stored request is the one sent, plus the seed drawn when it had none.
        assert kept["request"] == {**item["request"], "seed": result["seed"]}
        assert result["status"] == "done" and result["attempts"] == 1
        synchronous = client.post(_endpoint(item["kind"]), json=kept["request"])
        assert synchronous.status_code == 200, synchronous.text
        assert _without_timing(result["result"]) == _without_timing(synchronous.json())
    assert "seed" not in batch["items"][3]["request"]  # the example exercises seed drawing


def test_a_bad_item_fails_alone_with_the_endpoints_422_detail(make_client):
    client = make_client(max_thresholds=2)
    bad_severity = _exceedance(1)
    bad_severity["portfolio"]["lines"][0]["severity"]["mean"] = -1.0
    too_many = _exceedance(2, thresholds=[10.0, 20.0, 30.0])  # refused by a server limit
    items = [("good", "exceedance", _exceedance(3)), ("bad-severity", "exceedance", bad_severity),
             ("not-an-object", "exceedance", [1, 2]), ("too-many", "exceedance", too_many)]
    run = wait_for_run(client, client.post("/v1/runs", json=_batch(items)).json()["run_id"])
    assert run["status"] == "failed"
    assert run["progress"] == {"done": 4, "total": 4, "failed": 3, "running": 0, "queued": 0,
                               "cancelled": 0}
    results = {r["id"]: r for r in run["results"]}
    assert results["good"]["status"] == "done"
    assert results["good"]["result"]["seed"] == 3
    for item_id, _, request in items[1:]:
        failed = results[item_id]
        assert failed["status"] == "failed" and "result" not in failed
        synchronous = client.post("/v1/exceedance", json=request)
        assert synchronous.status_code == 422
        assert failed["error"] == synchronous.json()["detail"]
    assert results["bad-severity"]["error"][0]["loc"] == [
        "body", "portfolio", "lines", 0, "severity", "exponential", "mean"]
    assert results["too-many"]["error"] == [{
        "loc": ["body", "thresholds"], "type": "limit_exceeded",
        "msg": "holds 3 items; at most 2 are allowed (server limit max_thresholds)"}]


def _refused(client: TestClient, body: Any) -> list[dict[str, Any]]:
    response = client.post("/v1/runs", json=body)
    assert response.status_code == 422, response.text
    return response.json()["detail"]


def test_malformed_batches_are_refused_whole(make_client):
    client = make_client(max_run_items=3)
    good = ("a", "exceedance", _exceedance(1))
    assert _refused(client, {"items": _batch([good])["items"]}) == [
        {"loc": ["body", "name"], "msg": "Field required", "type": "missing"}]
    assert _refused(client, {"name": "x", "items": {"a": 1}}) == [
        {"loc": ["body", "items"], "msg": "Input should be a valid list", "type": "list_type"}]
    assert _refused(client, _batch([])) == [{
        "loc": ["body", "items"], "type": "too_short",
        "msg": "List should have at least 1 item after validation, not 0"}]
    assert _refused(client, _batch([good, ("b", "exceedance", {}), good])) == [{
        "loc": ["body", "items", 2, "id"], "type": "duplicate_id",
        "msg": "duplicate id 'a' (also items[0].id); ids must be unique within a batch"}]
    unknown = _refused(client, _batch([good, ("b", "value_at_risk", {})]))
    assert [(e["loc"], e["type"]) for e in unknown] == [
        (["body", "items", 1, "kind"], "literal_error")]
    assert _refused(client, _batch([good, ("b", "exceedance", {}), ("c", "exceedance", {}),
                                    ("d", "exceedance", {})])) == [{
        "loc": ["body", "items"], "type": "limit_exceeded",
        "msg": "holds 4 items; at most 3 are allowed (server limit max_run_items)"}]
    missing_request = _refused(client, {"name": "x", "items": [{"id": "a", "kind": "layers"}]})
    assert [(e["loc"], e["type"]) for e in missing_request] == [
        (["body", "items", 0, "request"], "missing")]
    assert client.get("/v1/runs").json()["runs"] == []  # nothing was stored


def test_a_kind_the_server_does_not_offer_yet_is_refused_at_submission(make_client):
    client = make_client()
    # Stand-in for a kind of the contract that is not in KINDS yet (ruin).
    client.app.state.runs.kinds = {"exceedance": KINDS["exceedance"]}
    detail = _refused(client, _batch([("a", "exceedance", _exceedance(1)),
                                      ("b", "layers", {})]))
    assert detail == [{
        "loc": ["body", "items", 1, "kind"], "type": "kind_unavailable",
        "msg": "kind 'layers' is not available on this server yet (available: exceedance)"}]


def test_cancel_stops_the_remaining_items(make_client):
    client = make_client(run_workers=1)
    items = [(f"slow-{i}", "exceedance", _exceedance(i, samples=300_000)) for i in range(8)]
    run_id = client.post("/v1/runs", json=_batch(items)).json()["run_id"]
    deadline = time.monotonic() + 20
    while client.get(f"/v1/runs/{run_id}").json()["progress"]["done"] < 1:
        assert time.monotonic() < deadline
        time.sleep(0.01)
    cancelled = client.delete(f"/v1/runs/{run_id}")
    assert cancelled.status_code == 200 and cancelled.json()["status"] == "cancelled"
    run = wait_for_run(client, run_id)
    assert run["status"] == "cancelled"
    statuses = [r["status"] for r in run["results"]]
    assert len(statuses) == 8
    # One item ran before the cancel, at most one more was running during it.
    assert statuses.count("done") in (1, 2, 3) and statuses.count("cancelled") >= 5
    assert statuses[-1] == "cancelled" and "result" not in run["results"][-1]
    time.sleep(0.3)
    assert client.get(f"/v1/runs/{run_id}").json()["results"] == run["results"]  # nothing ran
    again = client.delete(f"/v1/runs/{run_id}")  # safe to repeat
    assert again.status_code == 200 and again.json()["results"] == run["results"]
    missing = client.delete("/v1/runs/no-such-run")
    assert missing.status_code == 404
    assert missing.json()["detail"] == [{"loc": ["path", "run_id"], "type": "not_found",
                                         "msg": "no run with run_id 'no-such-run'"}]


def test_resubmission_with_the_same_idempotency_key_returns_the_existing_run(make_client):
    client = make_client()
    unseeded = _exceedance(0)
    del unseeded["seed"]
    batch = _batch([("a", "exceedance", unseeded)], name="quarter-end")
    key = {"Idempotency-Key": "quarter-end-2025Q2"}
    first = client.post("/v1/runs", json=batch, headers=key)
    assert first.status_code == 202
    run_id = first.json()["run_id"]
    seed = wait_for_run(client, run_id)["results"][0]["seed"]
    again = client.post("/v1/runs", json=batch, headers=key)
    assert again.status_code == 200 and again.json() == {"run_id": run_id, "status": "done"}
    assert wait_for_run(client, run_id)["results"][0]["seed"] == seed  # drawn once, kept
    changed = client.post("/v1/runs", json={**batch, "name": "other"}, headers=key)
    assert changed.status_code == 409
    assert changed.json()["detail"] == [{
        "loc": ["header", "Idempotency-Key"], "type": "idempotency_conflict",
        "msg": f"was already used for a different batch (run {run_id}); use a new key for a "
        "new batch"}]
    unkeyed = client.post("/v1/runs", json=batch)
    assert unkeyed.status_code == 202 and unkeyed.json()["run_id"] != run_id
    assert len(client.get("/v1/runs").json()["runs"]) == 2


def test_a_batch_of_200_small_items_completes(make_client):
    client = make_client()
    items = [(f"item-{i:03d}", "exceedance", _exceedance(i)) for i in range(200)]
    started = time.perf_counter()
    run = wait_for_run(client, client.post("/v1/runs", json=_batch(items)).json()["run_id"], 60)
    elapsed = time.perf_counter() - started
    assert run["status"] == "done" and run["progress"]["done"] == 200
    assert [r["id"] for r in run["results"]] == [i for i, _, _ in items]
    assert [r["result"]["seed"] for r in run["results"]] == list(range(200))
    # The 200 independent estimates pooled: P(S > 50) for a sum of three exponential(10)
    # claims is gamma(3, scale 10).sf(50) (closed form; scipy.stats), within 4.5 pooled
    # standard errors.
    estimates = [r["result"]["estimates"][0] for r in run["results"]]
    mean = sum(e["probability"] for e in estimates) / 200
    pooled_se = math.sqrt(sum(e["std_error"] ** 2 for e in estimates)) / 200
    assert abs(mean - stats.gamma(a=3, scale=10.0).sf(50.0)) <= 4.5 * pooled_se
    print(f"\n200-item batch: {elapsed:.2f} s ({elapsed / 200 * 1000:.1f} ms per item)")


def test_runs_are_listed_newest_first_by_page_cursor_and_status(make_client):
    client = make_client(run_workers=1)
    # The first run's item is slow, so run 3 is still queued when it is cancelled.
    ids = [client.post("/v1/runs", json=_batch(
        [("a", "exceedance", _exceedance(i, samples=500_000 if i == 0 else 200))],
        name=f"run {i}")).json()["run_id"] for i in range(5)]
    client.delete(f"/v1/runs/{ids[3]}")
    for run_id in ids:
        wait_for_run(client, run_id)
    seen: list[str] = []
    cursor: str | None = None
    while True:
        page = client.get("/v1/runs", params={"limit": 2, **({"cursor": cursor} if cursor
                                                              else {})}).json()
        assert len(page["runs"]) <= 2
        seen += [run["run_id"] for run in page["runs"]]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == ids[::-1]
    by_offset = client.get("/v1/runs", params={"limit": 2, "offset": 2}).json()["runs"]
    assert [run["run_id"] for run in by_offset] == ids[::-1][2:4]
    listed = client.get("/v1/runs", params={"status": "cancelled"}).json()["runs"]
    assert [run["run_id"] for run in listed] == [ids[3]]
    assert "results" not in listed[0] and listed[0]["engine_version"] == core.ENGINE_VERSION
    bad = client.get("/v1/runs", params={"cursor": "not-a-cursor"})
    assert bad.status_code == 422 and bad.json()["detail"][0]["loc"] == ["query", "cursor"]
    both = client.get("/v1/runs", params={"cursor": cursor or "x", "offset": 1})
    assert both.status_code == 422
    assert client.get("/v1/runs", params={"status": "paused"}).status_code == 422


def test_unknown_run_is_404_and_the_runs_routes_are_documented(client):
    response = client.get("/v1/runs/0123")
    assert response.status_code == 404 and response.json()["detail"][0]["type"] == "not_found"
    paths = client.get("/openapi.json").json()["paths"]
    assert {"/v1/runs", "/v1/runs/{run_id}", "/v1/runs/{run_id}/batch"} <= set(paths)
    assert set(paths["/v1/runs/{run_id}"]) == {"get", "delete"}
    example = paths["/v1/runs"]["post"]["requestBody"]["content"]["application/json"]["examples"]
    assert example["month_end"]["value"] == json.loads(EXAMPLE.read_text(encoding="utf-8"))


def test_a_run_repeated_from_its_stored_batch_gives_the_same_figures(client):
    batch = _batch([("a", "exceedance", {k: v for k, v in _exceedance(0).items()
                                         if k != "seed"})], name="audit")
    first = wait_for_run(client, client.post("/v1/runs", json=batch).json()["run_id"])
    stored = client.get(f"/v1/runs/{first['run_id']}/batch").json()
    repeat = wait_for_run(
        client, client.post("/v1/runs", json=copy.deepcopy(stored)).json()["run_id"])
    assert _without_timing(repeat["results"][0]["result"]) == _without_timing(
        first["results"][0]["result"])
