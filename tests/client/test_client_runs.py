"""Runs through the client: idempotent submits, retries, waiting with progress, repeats."""

from __future__ import annotations

import asyncio
import uuid
from typing import Any

import pytest
from client_harness import FaultProxy, Served

from client import (
    AsyncClient,
    Client,
    RequestRejected,
    RetryPolicy,
    RunResult,
    Unavailable,
    fresh_key,
)
from service.schemas.runs import RunSummary

FAST = RetryPolicy(attempts=4, base_delay_s=0.01, max_delay_s=0.05)
BOOK = {"lines": [{"label": "motor", "count": {"kind": "poisson", "mean": 4.0},
                   "severity": {"family": "gamma", "shape": 2.0, "scale": 1.5}}]}


def _batch(name: str) -> dict[str, Any]:
    return {"name": name, "items": [
        {"id": "tail", "kind": "exceedance",
         "request": {"portfolio": BOOK, "thresholds": [25.0], "precision": {"samples": 2000}}},
        {"id": "capital", "kind": "risk_measures",
         "request": {"portfolio": BOOK, "levels": [0.995], "precision": {"samples": 2000}}},
    ]}


def _runs_named(tg: Client, name: str) -> list[RunSummary]:
    return [run for run in tg.list_runs() if run.name == name]


def test_retried_submit_after_a_dropped_connection_leaves_one_run(proxy: FaultProxy) -> None:
    name = f"dropped-{uuid.uuid4().hex[:8]}"
    proxy.inject(b"POST /v1/runs", "drop")
    with Client(proxy.base_url, retry=FAST) as tg:
        submitted = tg.submit_run(_batch(name))
        assert proxy.count(b"POST /v1/runs") == 2  # the first answer was lost, then a retry
        assert not submitted.created  # the server recognised the key: no second run
        assert [run.run_id for run in _runs_named(tg, name)] == [submitted.run_id]


def test_resubmitting_the_same_batch_returns_the_same_run(server: Served) -> None:
    name = f"again-{uuid.uuid4().hex[:8]}"
    with Client(server.base_url) as tg:
        first = tg.submit_run(_batch(name))
        second = tg.submit_run(_batch(name))
        forced = tg.submit_run(_batch(name), idempotency_key=fresh_key())
    assert first.created and not second.created and forced.created
    assert second.run_id == first.run_id != forced.run_id


def test_503_with_retry_after_is_retried(proxy: FaultProxy) -> None:
    proxy.inject(b"POST /v1/exceedance", "503", times=2)
    with Client(proxy.base_url, retry=FAST) as tg:
        result = tg.exceedance(portfolio=BOOK, thresholds=[25.0],
                               precision={"samples": 1000}, seed=2)
    assert proxy.count(b"POST /v1/exceedance") == 3
    assert result.estimates[0].threshold == 25.0


def test_503_that_persists_is_raised_after_the_retries(proxy: FaultProxy) -> None:
    proxy.inject(b"POST /v1/exceedance", "503", times=4)
    with Client(proxy.base_url, retry=FAST) as tg, pytest.raises(Unavailable) as caught:
        tg.exceedance(portfolio=BOOK, thresholds=[25.0], precision={"samples": 1000}, seed=2)
    assert proxy.count(b"POST /v1/exceedance") == 4
    assert caught.value.retry_after == 0.0


def test_4xx_is_never_retried(proxy: FaultProxy) -> None:
    heavy = {"lines": [{"count": {"kind": "poisson", "mean": 1.0},
                        "severity": {"family": "pareto", "alpha": 0.8, "scale": 1.0}}]}
    with Client(proxy.base_url, retry=FAST) as tg, pytest.raises(RequestRejected):
        tg.risk_measures(portfolio=heavy, levels=[0.99], precision={"samples": 1000}, seed=1)
    assert proxy.count(b"POST /v1/risk-measures") == 1


def test_wait_reports_progress_and_the_stored_batch_repeats_the_figures(server: Served) -> None:
    seen: list[int] = []
    with Client(server.base_url) as tg:
        run = tg.run_batch(_batch(f"wait-{uuid.uuid4().hex[:8]}"), poll_interval_s=0.05,
                           progress=lambda r: seen.append(r.progress.done), progress_bar=False)
        assert isinstance(run, RunResult) and run.status == "done"
        assert seen[-1] == 2 and seen == sorted(seen)
        stored = tg.get_run_batch(run.run_id)  # seeds drawn at submission are in it
        again = tg.run_batch(stored, idempotency_key=fresh_key(), poll_interval_s=0.05)
    assert again.run_id != run.run_id
    assert again.item("tail").to_rows()[0]["probability"] == \
        run.item("tail").to_rows()[0]["probability"]
    rows = run.to_rows()
    assert {row["item"] for row in rows} == {"tail", "capital"}


def test_cancel_through_the_client(server: Served) -> None:
    with Client(server.base_url) as tg:
        submitted = tg.submit_run(_batch(f"cancel-{uuid.uuid4().hex[:8]}"))
        cancelled = tg.cancel_run(submitted.run_id)
        final = tg.wait_run(submitted.run_id, poll_interval_s=0.05, progress_bar=False)
    assert cancelled.run_id == submitted.run_id
    assert final.status in {"cancelled", "done"}  # items already running may finish


def test_async_run_batch(server: Served) -> None:
    async def go() -> RunResult:
        async with AsyncClient(server.base_url) as tg:
            return await tg.run_batch(_batch(f"async-{uuid.uuid4().hex[:8]}"),
                                      poll_interval_s=0.05, progress_bar=False)

    run = asyncio.run(go())
    assert run.status == "done" and run.progress.done == 2
