"""Hostile and edge input found by issue 13: each request as it was reported, and what it gets now.

Before the fixes these were 500s, 400s with a bare string detail, or 422s carrying the engine's
internal text.
"""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator
from typing import Any

import numpy as np
import pytest
import uvicorn
from fastapi import FastAPI

from service.app import create_app
from service.settings import Settings

EXP = {"family": "exponential", "mean": 1.0}


def _line(count: dict[str, Any], severity: dict[str, Any], **layer: float) -> dict[str, Any]:
    return {"count": count, "severity": severity, **layer}


def _body(lines: list[dict[str, Any]], **fields: Any) -> dict[str, Any]:
    return {"portfolio": {"lines": lines}, "seed": 7, "precision": {"samples": 2000}, **fields}


def _entry_shape(detail: Any) -> None:
    assert isinstance(detail, list) and detail
    for entry in detail:
        assert set(entry) == {"loc", "msg", "type"} and isinstance(entry["loc"], list)


# --- were 500 ---------------------------------------------------------------------------------


def test_ruin_with_a_tiny_retention_is_answered(client):
    # Was 500 (IndexError in the capped lognormal's tilt). psi(0) = 1/(1 + loading) for any
    # claim law (Pollaczek-Khinchine), inside the interval.
    body = {"process": {"claim_rate": 1.0, "severity": {"family": "lognormal", "mu": 0.0,
                                                        "sigma": 1.0},
                        "retention": 1e-10, "loading": 0.2},
            "capital": [0.0], "seed": 1, "precision": {"samples": 1000}}
    response = client.post("/v1/ruin", json=body)
    assert response.status_code == 200, response.text
    estimate = response.json()["estimates"][0]
    assert estimate["ci_low"] <= 1.0 / 1.2 <= estimate["ci_high"]


@pytest.mark.parametrize("count, severity", [
    ({"kind": "negative_binomial", "mean": 2.0, "dispersion": 2.0}, EXP),
    ({"kind": "poisson", "mean": 2.0}, {"family": "pareto", "alpha": 2.0, "scale": 1.0}),
])
def test_layers_with_a_per_claim_limit_of_1e_minus_272_are_answered(client, count, severity):
    # Was 500 (IndexError, found by schemathesis). Every claim pays the limit, so the layer's
    # expected loss is E[N] x limit (a fact of the model).
    limit = 1.7e-272
    body = _body([_line(count, severity, limit=limit)], layers=[{"attachment": 0.0,
                                                                 "limit": 1.0}])
    response = client.post("/v1/layers", json=body)
    assert response.status_code == 200, response.text
    layer = response.json()["layers"][0]
    assert layer["expected_loss_ci_low"] <= 2.0 * limit <= layer["expected_loss_ci_high"]


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity", "1e999"])
def test_a_batch_item_holding_a_non_finite_number_is_refused_at_submission(client, literal):
    # Was 500 (ValueError in the store's JSON): the stored batch cannot hold the number.
    raw = ('{"name": "x", "items": [{"id": "a", "kind": "exceedance", "request": '
           '{"thresholds": [1.0, ' + literal + ']}}]}')
    response = client.post("/v1/runs", content=raw, headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert response.json()["detail"] == [{
        "loc": ["body", "items", 0, "request"], "type": "finite_number",
        "msg": "request.thresholds[1] is NaN or infinite (or beyond double precision); a batch "
               "is stored as JSON, which has no such numbers",
    }]


@pytest.mark.parametrize("query", ["offset=" + "1" * 30, "offset=9007199254740992"])
def test_a_huge_offset_is_a_422(client, query):
    # Was 500 (OverflowError: SQLite integers are 64-bit).
    response = client.get(f"/v1/runs?{query}")
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"] == ["query", "offset"]


def test_a_forged_cursor_beyond_64_bits_is_a_422(client):
    import base64
    import json

    cursor = base64.urlsafe_b64encode(json.dumps({"before": 10**30}).encode()).decode()
    response = client.get(f"/v1/runs?cursor={cursor}")
    assert response.status_code == 422
    assert response.json()["detail"][0]["type"] == "cursor_invalid"


# --- error shapes -----------------------------------------------------------------------------


@pytest.mark.parametrize("raw, why", [
    (b'{"thresholds": ["\xff"]}', "the body is not valid UTF-8"),
    (b'{"seed": ' + b"1" * 5000 + b"}", "an integer literal has too many digits"),
])
def test_a_body_that_is_not_json_gets_the_list_shape(client, raw, why):
    # Was 400 {"detail": "There was an error parsing the body"}, a status and a shape the
    # OpenAPI document did not have.
    response = client.post("/v1/exceedance", content=raw,
                           headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert response.json()["detail"] == [
        {"loc": ["body"], "msg": f"JSON decode error: {why}", "type": "json_invalid"}]


def test_405_and_404_get_the_list_shape(client):
    wrong = client.get("/v1/exceedance")
    assert wrong.status_code == 405 and "POST" in wrong.headers["allow"]
    assert wrong.json()["detail"] == [{"loc": ["request", "method"], "msg": "Method Not Allowed",
                                       "type": "method_not_allowed"}]
    missing = client.get("/v1/nowhere")
    assert missing.status_code == 404
    assert missing.json()["detail"] == [{"loc": ["path"], "msg": "Not Found",
                                         "type": "not_found"}]


def test_a_bounded_generalized_pareto_gets_its_measures_not_internal_text(client):
    # Was 422 at body.portfolio: "ValueError: f(a) and f(b) must have different signs".
    # GPD xi = -10, scale 1 is bounded by 0.1, so one claim's VaR is at most 0.1 per claim.
    body = _body([_line({"kind": "poisson", "mean": 1.0},
                        {"family": "generalized_pareto", "xi": -10.0, "scale": 1.0})],
                 levels=[0.9])
    response = client.post("/v1/risk-measures", json=body)
    assert response.status_code == 200, response.text
    measure = response.json()["measures"][0]
    assert 0.0 < measure["var"] <= measure["tvar"]


def test_a_model_beyond_double_precision_is_refused_without_internal_text(client):
    # Weibull shape 0.01 has mean Gamma(101) ~ 9e157 and a variance that overflows: the engine
    # cannot work with it. Was "OverflowError: math range error" in the message.
    body = _body([_line({"kind": "poisson", "mean": 1.0},
                        {"family": "weibull", "shape": 0.01, "scale": 1.0})], levels=[0.9])
    response = client.post("/v1/risk-measures", json=body)
    assert response.status_code == 422
    [entry] = response.json()["detail"]
    # Refused at the line's severity (core's check of degenerate laws) or, failing that, at
    # the portfolio: either way a location and words, not the engine's exception text.
    assert entry["loc"][:2] == ["body", "portfolio"]
    assert "Error" not in entry["msg"] and "math range" not in entry["msg"]


# --- answers that were refusals ---------------------------------------------------------------


def test_fixed_zero_claims_is_answered_exactly(client):
    # S = 0 surely: P(S > x) is 1 below 0 and 0 from 0 on, exactly (a fact of the model).
    body = _body([_line({"kind": "fixed", "n": 0}, EXP)], thresholds=[-1.0, 0.0, 3.0])
    response = client.post("/v1/exceedance", json=body)
    assert response.status_code == 200, response.text
    out = response.json()
    assert (out["method"], out["stopped_by"]) == ("exact", "exact")
    assert [(e["probability"], e["ci_low"], e["ci_high"]) for e in out["estimates"]] == [
        (1.0, 1.0, 1.0), (0.0, 0.0, 0.0), (0.0, 0.0, 0.0)]


def test_limited_layers_of_an_infinite_mean_line_are_estimated_by_auto(client):
    # The docs promised it; only crude did it. Reference: a plain numpy simulation of the same
    # model (Poisson counts, Lomax claims by inversion: X = scale (U^(-1/alpha) - 1)), with its
    # own standard error; both are unbiased, so they agree within 4 combined standard errors.
    pareto = {"family": "pareto", "alpha": 0.5, "scale": 1.0}
    body = _body([_line({"kind": "poisson", "mean": 1.0}, pareto)],
                 layers=[{"attachment": 10.0, "limit": 100.0}], precision={"samples": 20000})
    response = client.post("/v1/layers", json=body)
    assert response.status_code == 200, response.text
    out = response.json()
    assert out["method"] == "crude"
    layer = out["layers"][0]
    rng = np.random.default_rng(20261202)
    counts = rng.poisson(1.0, 200_000)
    claims = (rng.random(int(counts.sum())) ** (-1.0 / 0.5) - 1.0)
    totals = np.bincount(np.repeat(np.arange(counts.size), counts), weights=claims,
                         minlength=counts.size)
    paid = np.minimum(np.maximum(totals - 10.0, 0.0), 100.0)
    ref, ref_se = paid.mean(), paid.std(ddof=1) / np.sqrt(paid.size)
    se = float(np.hypot(layer["expected_loss_std_error"], ref_se))
    assert abs(layer["expected_loss"] - ref) <= 4 * se


def test_other_methods_refuse_limited_layers_of_an_infinite_mean_line_at_method(client):
    pareto = {"family": "pareto", "alpha": 0.5, "scale": 1.0}
    body = _body([_line({"kind": "poisson", "mean": 1.0}, pareto)],
                 layers=[{"attachment": 10.0, "limit": 100.0}], method="conditional")
    response = client.post("/v1/layers", json=body)
    assert response.status_code == 422
    [entry] = response.json()["detail"]
    assert (entry["loc"], entry["type"]) == (["body", "method"], "method_error")
    assert "use crude or auto" in entry["msg"]


# --- a 500 keeps the connection ---------------------------------------------------------------


@pytest.fixture
def served_with_a_bug(tmp_path) -> Iterator[int]:
    """A real uvicorn on loopback serving the app plus one route that raises (a stand-in bug)."""
    app: FastAPI = create_app(Settings(data_dir=tmp_path / "data", executor="thread",
                                       workers=1))

    @app.get("/bug")
    async def bug() -> None:
        raise RuntimeError("a stand-in bug")

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = int(probe.getsockname()[1])
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="critical"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started
    yield port
    server.should_exit = True
    thread.join(timeout=20)


def _exchange(sock: socket.socket, path: str) -> tuple[int, bytes]:
    sock.sendall(f"GET {path} HTTP/1.1\r\nHost: localhost\r\n\r\n".encode())
    data = b""
    while b"\r\n\r\n" not in data:
        chunk = sock.recv(65536)
        if not chunk:
            raise ConnectionError("the server closed the connection")
        data += chunk
    head, _, body = data.partition(b"\r\n\r\n")
    length = next(int(line.split(b":")[1]) for line in head.split(b"\r\n")
                  if line.lower().startswith(b"content-length"))
    while len(body) < length:
        body += sock.recv(65536)
    return int(head.split()[1]), body


def test_after_a_500_the_keep_alive_connection_still_answers(served_with_a_bug):
    # Starlette's last-resort handler re-raised after sending the 500 and uvicorn then closed
    # the connection, so the client's next request on it was lost.
    with socket.create_connection(("127.0.0.1", served_with_a_bug), timeout=20) as sock:
        status, body = _exchange(sock, "/bug")
        assert status == 500 and b'"internal_error"' in body
        status, _ = _exchange(sock, "/v1/health")
        assert status == 200
