"""Every request body in openapi_examples/ is shown in the docs and answers sensibly."""

from __future__ import annotations

import itertools
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


# --- risk measures and layers ------------------------------------------------------------------

RISK_MEASURES_FILES = sorted(DEFAULT_EXAMPLES_DIR.glob("risk_measures_*.json"))
LAYERS_FILES = sorted(DEFAULT_EXAMPLES_DIR.glob("layers_*.json"))


def _ordered(low: float, value: float, high: float) -> bool:
    return low <= value <= high


def test_there_are_risk_measures_and_layers_examples():
    assert len(RISK_MEASURES_FILES) >= 2 and len(LAYERS_FILES) >= 2


@pytest.mark.parametrize("path", RISK_MEASURES_FILES, ids=lambda p: p.stem)
def test_risk_measures_example_answers_with_sensible_figures(client, path: Path):
    body = json.loads(path.read_text(encoding="utf-8"))
    response = client.post("/v1/risk-measures", json=body)
    assert response.status_code == 200, response.text
    result = response.json()
    assert result["seed"] == body["seed"]
    measures = result["measures"]
    assert [m["level"] for m in measures] == body["levels"]
    for m in measures:
        assert _ordered(m["var_ci_low"], m["var"], m["var_ci_high"])
        assert _ordered(m["tvar_ci_low"], m["tvar"], m["tvar_ci_high"])
        assert m["tvar"] >= m["var"]  # common practice: TVaR is the mean beyond VaR
    # One sample set: VaR cannot fall as the level rises, nor the loss as the return period.
    by_level = [m["var"] for m in sorted(measures, key=lambda m: m["level"])]
    assert by_level == sorted(by_level)
    curve = sorted(result["curve"], key=lambda c: c["return_period"])
    assert [c["return_period"] for c in result["curve"]] == body.get("return_periods", [])
    assert [c["loss"] for c in curve] == sorted(c["loss"] for c in curve)
    for c in curve:
        assert _ordered(c["loss_ci_low"], c["loss"], c["loss_ci_high"])
    for point in result["loss_return_periods"]:
        assert 0.0 <= point["probability_ci_low"] <= point["probability"]
        assert point["probability"] <= point["probability_ci_high"] <= 1.0


@pytest.mark.parametrize("path", LAYERS_FILES, ids=lambda p: p.stem)
def test_layers_example_answers_with_sensible_figures(client, path: Path):
    body = json.loads(path.read_text(encoding="utf-8"))
    response = client.post("/v1/layers", json=body)
    assert response.status_code == 200, response.text
    result = response.json()
    assert result["seed"] == body["seed"]
    layers = result["layers"]
    assert [(ly["attachment"], ly["limit"]) for ly in layers] == [
        (ly["attachment"], ly.get("limit")) for ly in body["layers"]
    ]
    for ly in layers:
        assert ly["expected_loss"] >= 0.0
        assert _ordered(ly["expected_loss_ci_low"], ly["expected_loss"],
                        ly["expected_loss_ci_high"])
        assert 0.0 <= ly["probability_attach_ci_low"] <= ly["probability_attach"]
        assert ly["probability_attach"] <= ly["probability_attach_ci_high"] <= 1.0
        if ly["limit"] is not None:
            # A limited layer loses at most its limit, and is exhausted only once attached.
            assert ly["expected_loss"] <= ly["limit"] * ly["probability_attach"] * (1 + 1e-12)
            assert ly["probability_exhaust"] <= ly["probability_attach"]


# --- ruin ------------------------------------------------------------------------------------

RUIN_FILES = sorted(DEFAULT_EXAMPLES_DIR.glob("ruin_*.json"))


def test_there_is_a_ruin_example():
    assert len(RUIN_FILES) >= 1


@pytest.mark.parametrize("path", RUIN_FILES, ids=lambda p: p.stem)
def test_ruin_example_answers_with_sensible_figures(client, path: Path):
    body = json.loads(path.read_text(encoding="utf-8"))
    response = client.post("/v1/ruin", json=body)
    assert response.status_code == 200, response.text
    result = response.json()
    assert result["seed"] == body["seed"]
    estimates = result["estimates"]
    assert [e["capital"] for e in estimates] == body["capital"]
    for e in estimates:
        assert 0.0 <= e["ci_low"] <= e["probability"] <= e["ci_high"] <= 1.0
        assert isinstance(e["diagnostics"]["reliable"], bool) and e["diagnostics"]["reason"]
    # More capital cannot make ruin likelier (beyond sampling noise).
    for e0, e1 in itertools.pairwise(estimates):
        if e1["capital"] > e0["capital"]:
            assert e1["probability"] <= e0["probability"] + 4 * (e0["std_error"] or 0.0)
    if "target_probability" in body:
        found = result["capital_for_target"]
        assert found["target"] == body["target_probability"]
        assert found["ci_low"] <= found["capital"] <= found["ci_high"]


@pytest.mark.parametrize(("route", "resource", "files"), [
    ("/v1/risk-measures", "risk_measures", RISK_MEASURES_FILES),
    ("/v1/layers", "layers", LAYERS_FILES),
    ("/v1/ruin", "ruin", RUIN_FILES),
])
def test_new_examples_are_named_in_the_openapi_document(client, route, resource, files):
    operation = client.get("/openapi.json").json()["paths"][route]["post"]
    examples = operation["requestBody"]["content"]["application/json"]["examples"]
    assert set(examples) == {p.stem.removeprefix(f"{resource}_") for p in files}
    for path in files:
        assert examples[path.stem.removeprefix(f"{resource}_")]["value"] == json.loads(
            path.read_text(encoding="utf-8"))
