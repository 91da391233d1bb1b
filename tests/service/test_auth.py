"""Bearer tokens and run owners.

Before: no authentication and no tenancy: any client listed, read and cancelled every run,
also behind --host 0.0.0.0.
"""

from __future__ import annotations

import hashlib
import logging
import sqlite3
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.auth import AuthConfigError, is_loopback, load_auth
from service.cli import main
from service.settings import Settings
from service.store import STORE_FILE

ALICE = "alice-7f3c9e1b5a2d4c6e8f0a1b3c5d7e9f11"
BOB = "bob-0a2b4c6d8e0f1a3b5c7d9e1f3a5b7c9d"


def _bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _batch(name: str = "month-end") -> dict[str, Any]:
    request = {"portfolio": {"lines": [{"count": {"kind": "fixed", "n": 2},
                                        "severity": {"family": "exponential", "mean": 1.0}}]},
               "thresholds": [5.0], "method": "crude", "precision": {"samples": 200},
               "seed": 3}
    return {"name": name, "items": [{"id": "a", "kind": "exceedance", "request": request}]}


@pytest.fixture
def secured(make_client: Any) -> TestClient:
    client: TestClient = make_client(tokens=f"{ALICE}, {BOB}")
    return client


def test_a_request_without_a_token_is_401_in_the_error_shape(secured, small_request):
    response = secured.post("/v1/exceedance", json=small_request())
    assert response.status_code == 401
    assert response.headers["WWW-Authenticate"] == 'Bearer realm="tailgauge"'
    assert response.json() == {"detail": [{
        "loc": ["header", "Authorization"],
        "msg": "a bearer token is required (Authorization: Bearer <token>)",
        "type": "not_authenticated"}]}
    assert secured.get("/v1/runs").status_code == 401


def test_an_unknown_or_malformed_token_is_401_invalid_token(secured):
    response = secured.get("/v1/runs", headers=_bearer("not-a-token"))
    assert response.status_code == 401
    assert response.headers["WWW-Authenticate"] == \
        'Bearer realm="tailgauge", error="invalid_token"'
    assert response.json()["detail"][0]["type"] == "invalid_token"
    basic = secured.get("/v1/runs", headers={"Authorization": f"Basic {ALICE}"})
    assert basic.status_code == 401
    assert basic.json()["detail"][0]["type"] == "not_authenticated"


def test_health_and_metrics_stay_open(secured):
    assert secured.get("/v1/health").status_code == 200
    assert secured.get("/metrics").status_code == 200


def test_a_computation_with_an_accepted_token_is_answered(secured, small_request):
    response = secured.post("/v1/exceedance", json=small_request(), headers=_bearer(BOB))
    assert response.status_code == 200, response.text


def test_runs_are_visible_only_to_the_token_that_created_them(secured, make_settings):
    created = secured.post("/v1/runs", json=_batch(), headers=_bearer(ALICE))
    assert created.status_code == 202, created.text
    run_id = created.json()["run_id"]
    assert [r["run_id"] for r in secured.get("/v1/runs", headers=_bearer(ALICE)).json()[
        "runs"]] == [run_id]
    assert secured.get("/v1/runs", headers=_bearer(BOB)).json()["runs"] == []
    for method, path in (("GET", f"/v1/runs/{run_id}"), ("GET", f"/v1/runs/{run_id}/batch"),
                         ("DELETE", f"/v1/runs/{run_id}")):
        foreign = secured.request(method, path, headers=_bearer(BOB))
        assert foreign.status_code == 404, (method, path, foreign.text)  # as an unknown id
        assert foreign.json()["detail"][0]["type"] == "not_found"
        assert secured.request(method, path, headers=_bearer(ALICE)).status_code == 200
    # The store holds the token's digest as owner, never the token.
    path = make_settings().data_dir / STORE_FILE
    with sqlite3.connect(path) as conn:
        owners = conn.execute("SELECT owner FROM runs").fetchall()
    assert owners == [(hashlib.sha256(ALICE.encode()).hexdigest(),)]
    stored = b"".join(p.read_bytes() for p in path.parent.iterdir() if p.is_file())
    assert ALICE.encode() not in stored and BOB.encode() not in stored


def test_idempotency_keys_are_per_token(secured):
    key = {"Idempotency-Key": "month-end-2025-06"}
    first = secured.post("/v1/runs", json=_batch("a"), headers={**_bearer(ALICE), **key})
    second = secured.post("/v1/runs", json=_batch("b"), headers={**_bearer(BOB), **key})
    assert (first.status_code, second.status_code) == (202, 202)  # no 409, no shared run
    assert first.json()["run_id"] != second.json()["run_id"]
    again = secured.post("/v1/runs", json=_batch("a"), headers={**_bearer(ALICE), **key})
    assert again.status_code == 200 and again.json()["run_id"] == first.json()["run_id"]


def test_tokens_never_reach_the_logs_or_the_settings_repr(secured, caplog, make_settings):
    caplog.set_level(logging.DEBUG)
    secured.post("/v1/runs", json=_batch(), headers=_bearer(ALICE))
    secured.get("/v1/runs", headers=_bearer(BOB))
    secured.get("/v1/runs", headers=_bearer("wrong-token-value"))
    assert ALICE not in caplog.text and BOB not in caplog.text
    assert "wrong-token-value" not in caplog.text
    settings = make_settings(tokens=ALICE)
    assert ALICE not in repr(settings) and ALICE not in str(settings.model_dump())


def test_a_token_file_is_read_with_comments(tmp_path, make_client):
    tokens = tmp_path / "tokens"
    tokens.write_text(f"# pricing pipeline\n{ALICE}\n\n{BOB}  # capital model\n")
    client = make_client(token_file=tokens)
    assert client.get("/v1/runs", headers=_bearer(BOB)).status_code == 200
    assert client.get("/v1/runs").status_code == 401


def test_auth_is_off_on_loopback_by_default_and_required_beyond_it():
    assert not load_auth(Settings(host="127.0.0.1")).enabled
    assert not load_auth(Settings(host="::1")).enabled
    assert not load_auth(Settings(host="localhost")).enabled
    assert load_auth(Settings(host="127.0.0.1", tokens=ALICE)).enabled
    with pytest.raises(AuthConfigError, match=r"listens on 0\.0\.0\.0, beyond loopback"):
        load_auth(Settings(host="0.0.0.0"))
    with pytest.raises(AuthConfigError, match="TAILGAUGE_AUTH=on"):
        load_auth(Settings(auth="on"))
    assert load_auth(Settings(host="0.0.0.0", tokens=ALICE)).enabled
    assert not load_auth(Settings(host="0.0.0.0", auth="off")).enabled  # explicitly disabled
    assert is_loopback("127.0.0.2") and not is_loopback("10.0.0.1")
    assert not is_loopback("tailgauge.internal")


def test_serving_beyond_loopback_without_tokens_is_one_line_and_exit_2(tmp_path, capsys,
                                                                       monkeypatch):
    monkeypatch.delenv("TAILGAUGE_TOKENS", raising=False)
    monkeypatch.delenv("TAILGAUGE_AUTH", raising=False)
    code = main(["serve", "--host", "0.0.0.0", "--data-dir", str(tmp_path / "d")])
    err = capsys.readouterr().err.splitlines()
    assert code == 2 and len(err) == 1
    assert err[0].startswith("tailgauge serve: bearer tokens are required (the server listens "
                             "on 0.0.0.0, beyond loopback) but none are configured")
    assert not (tmp_path / "d").exists()  # refused before anything was touched


def test_an_app_that_needs_tokens_and_has_none_does_not_start(make_settings):
    with pytest.raises(AuthConfigError), TestClient(create_app(make_settings(auth="on"))):
        pass


def test_the_openapi_document_lists_the_401(secured):
    paths = secured.get("/openapi.json").json()["paths"]
    assert "401" in paths["/v1/exceedance"]["post"]["responses"]
    assert "401" in paths["/v1/runs/{run_id}"]["delete"]["responses"]
    assert "401" not in paths["/v1/health"]["get"]["responses"]


def test_the_report_and_charts_of_a_run_need_its_owners_token(secured):
    run_id = secured.post("/v1/runs", json=_batch(), headers=_bearer(ALICE)).json()["run_id"]
    report = f"/v1/runs/{run_id}/report"
    assert secured.get(report).status_code == 401
    assert secured.get(report, headers=_bearer(BOB)).status_code == 404
    assert secured.get(report, headers=_bearer(ALICE)).status_code == 200
    chart = f"/v1/runs/{run_id}/items/a/chart"
    assert secured.get(chart, headers=_bearer(BOB)).status_code == 404
