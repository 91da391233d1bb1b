"""Small helpers the HTTP tests share: waiting for a run, and reading a single refusal."""

from __future__ import annotations

import time
from typing import Any

import httpx
from fastapi.testclient import TestClient

TERMINAL = {"done", "failed", "cancelled"}


def wait_for_run(client: TestClient, run_id: str, timeout: float = 30.0) -> dict[str, Any]:
    """The run's body once it is terminal and nothing of it is still running."""
    deadline = time.monotonic() + timeout
    body: dict[str, Any] = {}
    while time.monotonic() < deadline:
        body = client.get(f"/v1/runs/{run_id}").json()
        if body["status"] in TERMINAL and body["progress"]["running"] == 0:
            return body
        time.sleep(0.02)
    raise AssertionError(f"run {run_id} did not finish in {timeout} s: {body}")


def one_refusal(response: httpx.Response) -> dict[str, Any]:
    """The single entry of a 422's detail list (the documented error shape)."""
    assert response.status_code == 422, response.text
    detail = response.json()["detail"]
    assert len(detail) == 1, detail
    return dict(detail[0])
