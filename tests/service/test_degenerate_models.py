"""Issue 12: models that double precision cannot sample are a 422 naming the severity."""

from __future__ import annotations

import pytest


@pytest.mark.parametrize("severity", [
    {"family": "lognormal", "mu": 0.0, "sigma": 1e-17},
    {"family": "gamma", "shape": 1e-300, "scale": 1.0},
])
def test_numerically_degenerate_claims_are_a_422_at_the_severity(client, small_request, severity):
    body = small_request()
    body["portfolio"]["lines"][0]["severity"] = severity
    response = client.post("/v1/exceedance", json=body)
    assert response.status_code == 422
    detail = response.json()["detail"][0]
    assert detail["loc"] == ["body", "portfolio", "lines", 0, "severity"]
    assert detail["type"] == "parameter_error"
