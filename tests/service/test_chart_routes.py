"""Chart routes: GET /v1/runs/{run_id}/items/{item_id}/chart and POST /v1/<resource>/chart.
JSON stays the default of the computing endpoints; pictures are asked for by path."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import pytest
from fastapi.testclient import TestClient
from svg_reading import parse, series

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def test_exceedance_chart_route_draws_the_same_figures_as_the_json_endpoint(
        client: TestClient, small_request: Callable[..., dict[str, Any]]) -> None:
    body = small_request()
    picture = client.post("/v1/exceedance/chart", json=body)
    assert picture.status_code == 200
    assert picture.headers["content-type"] == "image/svg+xml"
    assert "series-estimate" in series(parse(picture.content))
    figures = client.post("/v1/exceedance", json=body)
    assert figures.headers["content-type"] == "application/json"  # still the default
    png = client.post("/v1/exceedance/chart?format=png&kind=reliability", json=body)
    assert png.headers["content-type"] == "image/png"
    assert png.content.startswith(PNG_SIGNATURE)


@pytest.mark.parametrize(("path", "body"), [
    ("/v1/risk-measures/chart?kind=var_tvar", {"levels": [0.9, 0.99]}),
    ("/v1/layers/chart?kind=layers", {"layers": [{"attachment": 5.0, "limit": 10.0}]}),
])
def test_every_portfolio_resource_has_a_chart_route(
        client: TestClient, small_request: Callable[..., dict[str, Any]], path: str,
        body: dict[str, Any]) -> None:
    request = small_request(**body)
    del request["thresholds"]
    reply = client.post(path, json=request)
    assert reply.status_code == 200, reply.text
    assert series(parse(reply.content))


def test_ruin_chart_route(client: TestClient) -> None:
    body = {"process": {"claim_rate": 1.0, "severity": {"family": "exponential", "mean": 1.0},
                        "loading": 0.3}, "capital": [1.0, 5.0],
            "precision": {"samples": 1000}, "seed": 1}
    reply = client.post("/v1/ruin/chart", json=body)
    assert reply.status_code == 200
    assert "series-estimate" in series(parse(reply.content))


def test_unknown_kind_and_format_are_422_naming_both_query_fields(
        client: TestClient, small_request: Callable[..., dict[str, Any]]) -> None:
    reply = client.post("/v1/exceedance/chart?kind=pie&format=gif", json=small_request())
    assert reply.status_code == 422
    detail = reply.json()["detail"]
    assert [(d["loc"], d["type"]) for d in detail] == [
        (["query", "kind"], "literal_error"), (["query", "format"], "literal_error")]


def test_a_kind_that_cannot_apply_is_refused_before_computing(
        client: TestClient, small_request: Callable[..., dict[str, Any]]) -> None:
    reply = client.post("/v1/exceedance/chart?kind=layers", json=small_request())
    assert reply.status_code == 422
    [entry] = reply.json()["detail"]
    assert entry["loc"] == ["query", "kind"] and entry["type"] == "chart_not_applicable"
    assert "exceedance, reliability" in entry["msg"]


def test_an_invalid_body_is_the_json_endpoints_422(
        client: TestClient, small_request: Callable[..., dict[str, Any]]) -> None:
    body = small_request(thresholds=[])
    chart, plain = (client.post(p, json=body) for p in ("/v1/exceedance/chart",
                                                         "/v1/exceedance"))
    assert chart.status_code == plain.status_code == 422
    assert chart.json() == plain.json()


def _run(client: TestClient, small_request: Callable[..., dict[str, Any]]) -> str:
    batch = {"name": "chart test", "items": [
        {"id": "tail", "kind": "exceedance", "request": small_request()},
        {"id": "broken", "kind": "exceedance", "request": small_request(thresholds=[])}]}
    run_id = str(client.post("/v1/runs", json=batch).json()["run_id"])
    deadline = time.monotonic() + 60
    while client.get(f"/v1/runs/{run_id}").json()["status"] in ("queued", "running"):
        assert time.monotonic() < deadline
        time.sleep(0.1)
    return run_id


def test_run_item_chart_and_its_errors(
        client: TestClient, small_request: Callable[..., dict[str, Any]]) -> None:
    run_id = _run(client, small_request)
    base = f"/v1/runs/{run_id}/items"
    default = client.get(f"{base}/tail/chart")
    assert default.status_code == 200 and default.headers["content-type"] == "image/svg+xml"
    assert "series-estimate" in series(parse(default.content))
    png = client.get(f"{base}/tail/chart?kind=reliability&format=png")
    assert png.content.startswith(PNG_SIGNATURE)
    cases = [
        (f"{base}/tail/chart?kind=ruin", 422, ["query", "kind"], "chart_not_applicable"),
        (f"{base}/tail/chart?format=jpeg", 422, ["query", "format"], "literal_error"),
        (f"{base}/broken/chart", 409, ["path", "item_id"], "item_not_done"),
        (f"{base}/nothing/chart", 404, ["path", "item_id"], "not_found"),
        ("/v1/runs/no-run/items/tail/chart", 404, ["path", "run_id"], "not_found"),
    ]
    for url, status, loc, kind in cases:
        reply = client.get(url)
        assert reply.status_code == status, url
        [entry] = reply.json()["detail"]
        assert (entry["loc"], entry["type"]) == (loc, kind), url


def test_openapi_lists_the_picture_routes_with_every_status(client: TestClient) -> None:
    paths = client.get("/openapi.json").json()["paths"]
    item = paths["/v1/runs/{run_id}/items/{item_id}/chart"]["get"]
    assert set(item["responses"]) == {"200", "401", "404", "409", "422", "500"}
    assert set(item["responses"]["200"]["content"]) == {"image/svg+xml", "image/png"}
    for resource in ("exceedance", "risk-measures", "layers", "ruin"):
        post = paths[f"/v1/{resource}/chart"]["post"]
        assert {"200", "413", "422", "503"} <= set(post["responses"])
    report = paths["/v1/runs/{run_id}/report"]["get"]
    assert {"200", "404"} <= set(report["responses"])
    assert "text/html" in report["responses"]["200"]["content"]
