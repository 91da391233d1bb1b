"""Health, metrics, OpenAPI documentation and settings of the app."""

from __future__ import annotations

import re
from typing import Any

from fastapi.testclient import TestClient
from prometheus_client.parser import text_string_to_metric_families

import core
from service.app import create_app
from service.settings import Settings


def _samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    return {
        (s.name, tuple(sorted(s.labels.items()))): s.value
        for family in text_string_to_metric_families(text)
        for s in family.samples
    }


def test_health_reports_ok_and_the_engine_version(client):
    response = client.get("/v1/health")
    assert response.status_code == 200
    body = response.json()
    assert body["status"] == "ok"
    assert body["engine_version"] == core.ENGINE_VERSION
    assert body["executor"] == "thread" and body["workers"] == 2
    assert body["computations_in_flight"] == 0


def test_metrics_count_requests_by_route_template_and_status(make_client, small_request):
    client = make_client()
    client.post("/v1/exceedance", json=small_request())
    client.post("/v1/exceedance", json=small_request(thresholds=[]))
    client.post(
        "/v1/exceedance", content=b"x" * (2 * 1024 * 1024),
        headers={"content-type": "application/json"},
    )
    client.get("/no/such/page")
    response = client.get("/metrics")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/plain")
    samples = _samples(response.text)

    def requests(route: str, status: str, method: str = "POST") -> float:
        key = (
            "tailgauge_http_requests_total",
            (("method", method), ("route", route), ("status", status)),
        )
        return samples.get(key, 0.0)

    assert requests("/v1/exceedance", "200") == 1
    assert requests("/v1/exceedance", "422") == 1
    assert requests("/v1/exceedance", "413") == 1  # answered before routing, still labelled
    assert requests("<unmatched>", "404", "GET") == 1
    latency_count = (
        "tailgauge_http_request_duration_seconds_count",
        (("method", "POST"), ("route", "/v1/exceedance")),
    )
    assert samples[latency_count] == 3
    drawn = samples[("tailgauge_samples_drawn_total", (("resource", "exceedance"),))]
    assert drawn == 2000  # the request's fixed sample count
    assert samples[("tailgauge_computations_in_flight", ())] == 0


def test_each_app_has_its_own_metrics_registry(make_client, small_request):
    first, second = make_client(), make_client()
    first.post("/v1/exceedance", json=small_request())
    drawn = ("tailgauge_samples_drawn_total", (("resource", "exceedance"),))
    assert _samples(first.get("/metrics").text)[drawn] == 2000
    assert drawn not in _samples(second.get("/metrics").text)


def _properties(schema: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return schema.get("properties", {})


def test_every_schema_field_has_a_description(client):
    components = client.get("/openapi.json").json()["components"]["schemas"]
    missing = [
        f"{name}.{field}"
        for name, schema in components.items()
        if name not in {"HTTPValidationError", "ValidationError"}
        for field, spec in _properties(schema).items()
        if not spec.get("description")
    ]
    assert missing == []


def test_every_route_declares_a_response_model(client):
    paths = client.get("/openapi.json").json()["paths"]
    for path, operations in paths.items():
        for method, operation in operations.items():
            content = operation["responses"]["200"]["content"]
            assert any("schema" in v for v in content.values()) or path == "/metrics", (
                path, method,
            )
    assert {"/v1/exceedance", "/v1/risk-measures", "/v1/layers", "/v1/health", "/metrics",
            "/v1/runs", "/v1/runs/{run_id}"} <= set(paths)


def test_openapi_states_the_cautions(client):
    description = client.get("/openapi.json").json()["info"]["description"]
    assert re.search(r"[Mm]odel risk dominates sampling error", description)
    assert "not advice" in description


def test_settings_come_from_tailgauge_environment_variables(monkeypatch, tmp_path):
    monkeypatch.setenv("TAILGAUGE_PORT", "9123")
    monkeypatch.setenv("TAILGAUGE_MAX_THRESHOLDS", "7")
    monkeypatch.setenv("TAILGAUGE_EXECUTOR", "thread")
    monkeypatch.setenv("TAILGAUGE_DATA_DIR", str(tmp_path / "store"))
    settings = Settings()
    assert (settings.port, settings.max_thresholds, settings.executor) == (9123, 7, "thread")
    assert settings.host == "127.0.0.1" and settings.max_body_bytes == 1024 * 1024
    with TestClient(create_app(settings)) as client:
        assert (tmp_path / "store").is_dir()  # created at start-up
        response = client.post("/v1/exceedance", json={
            "portfolio": {"lines": [{"count": {"kind": "fixed", "n": 1},
                                     "severity": {"family": "exponential", "mean": 1.0}}]},
            "thresholds": [1.0] * 8,
        })
        assert response.json()["detail"][0]["msg"] == (
            "holds 8 items; at most 7 are allowed (server limit max_thresholds)"
        )
