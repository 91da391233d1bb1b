"""Bad input gets a 422 whose whole body says where and what: never a 500, never an echo."""

from __future__ import annotations

import json
from typing import Any

from fastapi.testclient import TestClient

SEVERITY_TAGS = (
    "'lognormal', 'pareto', 'weibull', 'gamma', 'exponential', 'normal', 'generalized_pareto', "
    "'spliced'"
)
LINE0 = ["body", "portfolio", "lines", 0]


def _post_json(client: TestClient, body: dict[str, Any]) -> Any:
    return client.post("/v1/exceedance", json=body)


def _post_text(client: TestClient, text: str) -> Any:
    return client.post(
        "/v1/exceedance", content=text, headers={"content-type": "application/json"}
    )


def _error(loc: list[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"detail": [{"loc": loc, "msg": msg, "type": type_}]}


def test_negative_sigma_is_refused_with_its_location(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["severity"]["sigma"] = -1.0
    response = _post_json(client, body)
    assert response.status_code == 422
    assert response.json() == _error(
        [*LINE0, "severity", "lognormal", "sigma"], "Input should be greater than 0", "greater_than"
    )


def test_binomial_probability_outside_unit_interval_is_refused(client, small_request):
    body = small_request()
    line = body["portfolio"]["lines"][0]
    for value, msg, kind in (
        (1.5, "Input should be less than or equal to 1", "less_than_equal"),
        (0.0, "Input should be greater than 0", "greater_than"),
    ):
        line["count"] = {"kind": "binomial", "trials": 10, "probability": value}
        response = _post_json(client, body)
        assert response.status_code == 422
        assert response.json() == _error([*LINE0, "count", "binomial", "probability"], msg, kind)


def test_nan_and_infinity_literals_are_refused(client, small_request):
    text = json.dumps(small_request())
    for literal in ("NaN", "Infinity", "-Infinity"):
        bad = text.replace('"thresholds": [5.0', f'"thresholds": [{literal}')
        response = _post_text(client, bad)
        assert response.status_code == 422, literal
        assert response.json() == _error(
            ["body", "thresholds", 0], "Input should be a finite number", "finite_number"
        )
    bad_sigma = text.replace('"sigma": 1.0', '"sigma": NaN')
    assert _post_text(client, bad_sigma).json() == _error(
        [*LINE0, "severity", "lognormal", "sigma"], "Input should be a finite number",
        "finite_number",
    )


def test_string_where_a_number_belongs_is_refused_not_coerced(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["severity"]["sigma"] = "1.5"
    response = _post_json(client, body)
    assert response.status_code == 422
    assert response.json() == _error(
        [*LINE0, "severity", "lognormal", "sigma"], "Input should be a valid number", "float_type"
    )


def test_parameters_beyond_double_precision_ranges_are_refused(client, small_request):
    body = small_request()
    line = body["portfolio"]["lines"][0]
    line["severity"]["mu"] = 1e300  # exp(mu) would overflow
    line["count"] = {"kind": "fixed", "n": 10**400}
    response = _post_json(client, body)
    assert response.status_code == 422
    assert response.json() == {"detail": [
        {"loc": [*LINE0, "count", "fixed", "n"],
         "msg": "Input should be less than or equal to 1000000000", "type": "less_than_equal"},
        {"loc": [*LINE0, "severity", "lognormal", "mu"],
         "msg": "Input should be less than or equal to 50", "type": "less_than_equal"},
    ]}


def test_fractional_claim_count_is_refused(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["count"] = {"kind": "fixed", "n": 2.5}
    assert _post_json(client, body).json() == _error(
        [*LINE0, "count", "fixed", "n"], "Input should be a valid integer", "int_type"
    )


def test_unknown_family_is_refused_naming_the_known_ones(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["severity"] = {"family": "cauchy", "scale": 1.0}
    response = _post_json(client, body)
    assert response.status_code == 422
    assert response.json() == _error(
        [*LINE0, "severity"],
        f"Input tag 'cauchy' found using 'family' does not match any of the expected tags: "
        f"{SEVERITY_TAGS}",
        "union_tag_invalid",
    )


def test_empty_threshold_list_is_refused(client, small_request):
    response = _post_json(client, small_request(thresholds=[]))
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", "thresholds"], "List should have at least 1 item after validation, not 0",
        "too_short",
    )


def test_too_many_thresholds_are_refused_naming_the_limit(client, small_request):
    response = _post_json(client, small_request(thresholds=[1.0] * 1001))
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", "thresholds"],
        "holds 1001 items; at most 1000 are allowed (server limit max_thresholds)",
        "limit_exceeded",
    )


def test_misspelt_field_is_refused(client, small_request):
    body = small_request()
    body["precision"] = {"sample": 2000}
    assert _post_json(client, body).json() == _error(
        ["body", "precision", "sample"], "Extra inputs are not permitted", "extra_forbidden"
    )


def test_seed_beyond_json_safe_integers_is_refused(client, small_request):
    assert _post_json(client, small_request(seed=2**53)).json() == _error(
        ["body", "seed"], "Input should be less than or equal to 9007199254740991",
        "less_than_equal",
    )


def test_negative_binomial_dispersion_must_exceed_one(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["count"] = {
        "kind": "negative_binomial", "mean": 3.0, "dispersion": 1.0,
    }
    assert _post_json(client, body).json() == _error(
        [*LINE0, "count", "negative_binomial", "dispersion"], "Input should be greater than 1",
        "greater_than",
    )


def test_retention_above_a_bounded_severity_is_refused(client, small_request):
    body = small_request()
    line = body["portfolio"]["lines"][0]
    line["severity"] = {"family": "generalized_pareto", "xi": -0.5, "scale": 10.0}
    line["retention"] = 25.0  # support ends at scale / -xi = 20
    assert _post_json(client, body).json() == _error(
        LINE0,
        "Value error, retention 25 is at or above the largest possible claim 20 (scale / -xi), "
        "so the line can never pay",
        "value_error",
    )


def test_max_samples_below_samples_is_refused(client, small_request):
    body = small_request(precision={"samples": 5000, "max_samples": 1000, "relative_error": 0.1})
    assert _post_json(client, body).json() == _error(
        ["body", "precision"],
        "Value error, max_samples (1000) must be at least samples (5000)",
        "value_error",
    )


def test_malformed_json_is_a_422_with_the_parser_message(client):
    response = _post_text(client, '{"thresholds": [1,}')
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", 18], "JSON decode error: Expecting value", "json_invalid"
    )


def test_deeply_nested_json_is_refused_without_a_500(client, small_request):
    depth = 100_000
    text = json.dumps(small_request()).replace(
        '"thresholds": [5.0, 20.0]', '"thresholds": ' + "[" * depth + "]" * depth
    )
    response = _post_text(client, text)
    assert response.status_code == 422
    assert response.json() == _error(["body"], "JSON decode error: nested too deeply",
                                     "json_invalid")


def test_moderately_nested_json_gets_an_ordinary_type_error(client, small_request):
    # Shallow enough for the parser: the schema itself reports the wrong shape.
    text = json.dumps(small_request()).replace(
        '"thresholds": [5.0, 20.0]', '"thresholds": ' + "[" * 500 + "]" * 500
    )
    assert _post_text(client, text).json() == _error(
        ["body", "thresholds", 0], "Input should be a valid number", "float_type"
    )
