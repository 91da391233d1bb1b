"""Every request body in openapi_examples/ is shown in the docs and answers sensibly."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.settings import DEFAULT_EXAMPLES_DIR

EXAMPLE_FILES = sorted(DEFAULT_EXAMPLES_DIR.glob("exceedance_*.json"))


def test_there_are_at_least_three_exceedance_examples():
    assert len(EXAMPLE_FILES) >= 3


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_example_answers_with_sensible_figures(client, path: Path):
    body = json.loads(path.read_text(encoding="utf-8"))
    response = client.post("/v1/exceedance", json=body)
    assert response.status_code == 200, response.text
    result = response.json()
    assert result["seed"] == body["seed"]
    estimates = result["estimates"]
    assert [e["threshold"] for e in estimates] == body["thresholds"]
    for e in estimates:
        assert 0.0 <= e["ci_low"] <= e["probability"] <= e["ci_high"] <= 1.0
        assert e["samples"] >= 100 and 0 <= e["hits"] <= e["samples"]
        assert isinstance(e["diagnostics"]["reliable"], bool) and e["diagnostics"]["reason"]
    probabilities = [e["probability"] for e in estimates]
    # Exceedance probabilities cannot rise with the threshold (beyond sampling noise).
    for (x0, p0, e0), (x1, p1) in zip(
        zip(body["thresholds"], probabilities, estimates, strict=True),
        zip(body["thresholds"][1:], probabilities[1:], strict=True),
        strict=False,
    ):
        if x1 > x0:
            assert p1 <= p0 + 4 * ((e0["std_error"] or 0.0) + 1e-300)


def test_examples_are_named_in_the_openapi_document(client):
    operation = client.get("/openapi.json").json()["paths"]["/v1/exceedance"]["post"]
    examples = operation["requestBody"]["content"]["application/json"]["examples"]
    assert set(examples) == {p.stem.removeprefix("exceedance_") for p in EXAMPLE_FILES}
    for path in EXAMPLE_FILES:
        shown = examples[path.stem.removeprefix("exceedance_")]
        assert shown["value"] == json.loads(path.read_text(encoding="utf-8"))
        assert shown["summary"]
