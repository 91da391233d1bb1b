"""POST /v1/ruin end to end (thread pool): ruin probabilities against the exponential-claims and
phase-type closed forms, recursion bounds, bad input with full error bodies, seeds, and the
batch code path."""

from __future__ import annotations

import json
import math
import time
from typing import Any

import numpy as np
import pytest
from scipy.linalg import expm

ROUTE = "/v1/ruin"
Z95 = 1.959963984540054
CONTRACT_FIELDS = {
    "method", "seed", "elapsed_s", "warnings", "engine_version", "method_reason", "stopped_by",
    "adjustment_coefficient", "lundberg_constant", "premium_rate", "estimates",
    "capital_for_target",
}
ESTIMATE_FIELDS = {
    "capital", "probability", "std_error", "relative_error", "ci_low", "ci_high", "samples",
    "hits", "diagnostics", "approximation",
}
DIAGNOSTICS_FIELDS = {
    "pareto_k", "effective_samples", "largest_share", "batch_ratio", "reliable", "reason",
}
# 50 claims a year, exponential with mean 2000, loading 20%.
RATE, MEAN, THETA = 50.0, 2000.0, 0.2
EXPONENTIAL = {"claim_rate": RATE, "severity": {"family": "exponential", "mean": MEAN},
               "loading": THETA}


def _request(**fields: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "process": EXPONENTIAL, "capital": [0.0, 20000.0, 80000.0],
        "precision": {"samples": 2000}, "seed": 31,
    }
    body.update(fields)
    return body


def exponential_psi(u: float, theta: float = THETA, mean: float = MEAN) -> float:
    # Classical closed form for exponential claims:
    # psi(u) = exp(-theta u / ((1 + theta) mean)) / (1 + theta).
    return math.exp(-theta * u / ((1 + theta) * mean)) / (1 + theta)


def exponential_capital(target: float, theta: float = THETA, mean: float = MEAN) -> float:
    # The same closed form solved for psi(u) = target.
    return (1 + theta) * mean / theta * math.log(1.0 / ((1 + theta) * target))


def phase_type_psi(alpha: np.ndarray, sub: np.ndarray, lam: float, c: float, u: float) -> float:
    # Asmussen & Albrecher, Ruin Probabilities (2010), Cor. IX.3.1 (from memory):
    # psi(u) = alpha_+ expm((T + t alpha_+) u) 1, alpha_+ = (lambda / c) alpha (-T)^-1.
    alpha_plus = lam / c * alpha @ np.linalg.inv(-sub)
    exit_rates = -sub.sum(axis=1)
    return float(alpha_plus @ expm((sub + np.outer(exit_rates, alpha_plus)) * u)
                 @ np.ones(alpha.size))


def _within(estimate: dict[str, Any], exact: float, k: float = 4.0) -> bool:
    # k reported standard errors: several checks per test, hence 4 rather than 1.96
    return abs(estimate["probability"] - exact) <= k * estimate["std_error"]


def _error(loc: list[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"detail": [{"loc": loc, "msg": msg, "type": type_}]}


def _strict_json(text: str) -> Any:
    def refuse(constant: str) -> None:
        raise AssertionError(f"non-JSON constant {constant} in the response")

    return json.loads(text, parse_constant=refuse)


# --- figures ---------------------------------------------------------------------------------


def test_response_carries_the_contract_fields(client):
    response = client.post(ROUTE, json=_request(target_probability=1e-3))
    assert response.status_code == 200, response.text
    result = response.json()
    assert CONTRACT_FIELDS <= set(result)
    assert result["seed"] == 31 and result["horizon"] is None
    for e in result["estimates"]:
        assert ESTIMATE_FIELDS <= set(e) and DIAGNOSTICS_FIELDS <= set(e["diagnostics"])
    assert set(result["capital_for_target"]) == {"target", "capital", "ci_low", "ci_high"}
    # c = (1 + theta) lambda E[X] (the loading's definition)
    assert result["premium_rate"] == pytest.approx((1 + THETA) * RATE * MEAN, rel=1e-12)
    assert client.post(ROUTE, json=_request()).json()["capital_for_target"] is None


def test_exponential_claims_match_the_closed_form(client):
    result = client.post(ROUTE, json=_request(target_probability=1e-4)).json()
    assert result["method"] == "tilted"  # light tails: Siegmund's algorithm
    # gamma = theta / ((1 + theta) mean), C = 1 / (1 + theta) (classical closed form)
    assert result["adjustment_coefficient"] == pytest.approx(THETA / ((1 + THETA) * MEAN),
                                                             rel=1e-9)
    assert result["lundberg_constant"] == pytest.approx(1 / (1 + THETA), rel=1e-9)
    for e in result["estimates"]:
        exact = exponential_psi(e["capital"])
        assert _within(e, exact), (e, exact)
        assert e["ci_low"] <= e["probability"] <= e["ci_high"]
        assert e["approximation"] == pytest.approx(exact, rel=1e-9)  # exact for exponentials
    found = result["capital_for_target"]
    exact = exponential_capital(1e-4)
    se = (found["ci_high"] - found["ci_low"]) / (2 * Z95)  # read off the 95% interval
    assert abs(found["capital"] - exact) <= 4 * se, (found, exact)


def test_erlang_claims_match_the_phase_type_formula(client):
    # gamma(shape 2, scale 1000) is Erlang-2: phase-type with alpha = (1, 0), T = r [[-1, 1],
    # [0, -1]], r = 1/1000.
    process = {"claim_rate": 10.0, "severity": {"family": "gamma", "shape": 2.0,
                                                "scale": 1000.0}, "loading": 0.1}
    result = client.post(ROUTE, json=_request(process=process, capital=[5000.0, 50000.0])).json()
    r = 1e-3
    alpha, sub = np.array([1.0, 0.0]), np.array([[-r, r], [0.0, -r]])
    c = 1.1 * 10.0 * 2000.0
    assert result["premium_rate"] == pytest.approx(c, rel=1e-12)
    for e in result["estimates"]:
        exact = phase_type_psi(alpha, sub, 10.0, c, e["capital"])
        assert _within(e, exact), (e, exact)


def test_recursion_bounds_bracket_the_closed_form_without_sampling(client):
    body = _request(method="recursion", capital=[0.0, 20000.0, 60000.0],
                    target_probability=1e-3)
    result = client.post(ROUTE, json=body).json()
    assert result["method"] == "recursion" and result["warnings"] == []
    for e in result["estimates"]:
        exact = exponential_psi(e["capital"])
        assert e["ci_low"] <= exact <= e["ci_high"], (e, exact)
        assert e["ci_low"] <= e["probability"] <= e["ci_high"]
        assert e["std_error"] is None and e["samples"] == 0
    found = result["capital_for_target"]
    # ci_low surely falls short and ci_high surely suffices (rigorous bounds)
    assert found["ci_low"] < exponential_capital(1e-3) <= found["ci_high"]
    assert found["ci_low"] <= found["capital"] <= found["ci_high"]


def test_heavy_tails_agree_with_the_recursion_bounds(client):
    # Lomax claims: no adjustment coefficient; conditional Monte Carlo must fall within 4 of its
    # standard errors of the rigorous bounds of the independent deterministic method.
    process = {"claim_rate": 5.0, "severity": {"family": "pareto", "alpha": 3.0,
                                               "scale": 2000.0}, "loading": 0.2}
    caps = [20000.0, 330000.0]
    mc = client.post(ROUTE, json=_request(process=process, capital=caps,
                                          precision={"samples": 20000})).json()
    bounds = client.post(ROUTE, json=_request(process=process, capital=caps,
                                              method="recursion")).json()
    assert mc["adjustment_coefficient"] is None and mc["lundberg_constant"] is None
    assert mc["method"] != "recursion"
    for e, b in zip(mc["estimates"], bounds["estimates"], strict=True):
        assert b["ci_low"] - 4 * e["std_error"] <= e["probability"] <= (
            b["ci_high"] + 4 * e["std_error"]), (e, b)


def test_finite_horizon_stays_below_the_infinite_horizon_value(client):
    # Ruin by time T implies ruin ever: psi(u, T) <= psi(u) (a fact of the definition).
    result = client.post(ROUTE, json=_request(capital=[20000.0], horizon=2.0)).json()
    assert result["horizon"] == 2.0
    (e,) = result["estimates"]
    assert 0.0 < e["probability"] <= exponential_psi(20000.0) + 4 * e["std_error"]


def test_retention_caps_the_claim_and_makes_an_infinite_mean_usable(client):
    # Pareto alpha 0.9 has an infinite mean; capped at 10000 per claim it is finite and light.
    process = {"claim_rate": 5.0, "severity": {"family": "pareto", "alpha": 0.9,
                                               "scale": 1000.0},
               "loading": 0.3, "retention": 10000.0}
    result = client.post(ROUTE, json=_request(process=process, capital=[50000.0])).json()
    # E[min(X, R)] = scale / (alpha - 1) (1 - (1 + R / scale)^(1 - alpha)) (the limited
    # expected value of the Lomax law, by integrating its survival function)
    lev = 1000.0 / -0.1 * (1 - 11.0 ** 0.1)
    assert result["mean_claim"] == pytest.approx(lev, rel=1e-9)
    assert result["premium_rate"] == pytest.approx(1.3 * 5.0 * lev, rel=1e-9)
    assert result["adjustment_coefficient"] is not None


@pytest.mark.parametrize("premium", [{"loading": 0.0}, {"loading": -0.5},
                                     {"premium_rate": 90000.0}])
def test_failed_net_profit_condition_is_certain_ruin_with_a_warning(client, premium):
    # Common practice (classical theory): c <= lambda E[X] (here 100000) means certain ruin.
    process = {"claim_rate": RATE, "severity": {"family": "exponential", "mean": MEAN},
               **premium}
    response = client.post(ROUTE, json=_request(process=process, target_probability=0.01))
    assert response.status_code == 200, response.text
    result = response.json()
    assert result["method"] == "exact" and result["stopped_by"] == "exact"
    assert "net profit condition fails" in result["warnings"][0]
    for e in result["estimates"]:
        assert (e["probability"], e["ci_low"], e["ci_high"], e["samples"]) == (1.0, 1.0, 1.0, 0)
    assert result["capital_for_target"]["capital"] is None


def test_same_seed_gives_identical_figures_and_a_drawn_seed_replays(client):
    body = _request(target_probability=1e-3)
    first, second = (client.post(ROUTE, json=body).json() for _ in range(2))
    first.pop("elapsed_s"), second.pop("elapsed_s")
    assert first == second
    other = client.post(ROUTE, json={**body, "seed": 32}).json()
    assert other["estimates"][1]["probability"] != first["estimates"][1]["probability"]
    drawn = client.post(ROUTE, json={k: v for k, v in body.items() if k != "seed"}).json()
    replay = client.post(ROUTE, json={**body, "seed": drawn["seed"]}).json()
    assert replay["estimates"] == drawn["estimates"]


def test_no_nan_or_infinity_and_no_hits_give_a_one_sided_bound(client):
    # Crude simulation of a capital far out: no path is ruined in 500, so the estimate is 0
    # with a one-sided 95% upper bound, never "0 +- 0" and never NaN.
    body = _request(capital=[400000.0], method="crude", precision={"samples": 500},
                    horizon=5.0)
    result = _strict_json(client.post(ROUTE, json=body).text)
    (e,) = result["estimates"]
    assert e["hits"] == 0 and e["probability"] == 0.0 and e["std_error"] is None
    # the rule of three: 1 - 0.05^(1/n) (common practice)
    assert e["ci_high"] == pytest.approx(-math.expm1(math.log(0.05) / 500), rel=1e-12)
    assert any("no sample path was ruined" in w for w in result["warnings"])


def test_a_ruin_item_in_a_batch_gives_the_endpoint_body(client):
    body = _request(target_probability=1e-3)
    batch = {"name": "ruin check", "items": [{"id": "motor", "kind": "ruin", "request": body}]}
    accepted = client.post("/v1/runs", json=batch)
    assert accepted.status_code == 202, accepted.text
    run_id = accepted.json()["run_id"]
    deadline = time.monotonic() + 60
    while (run := client.get(f"/v1/runs/{run_id}").json())["status"] not in ("done", "failed"):
        assert time.monotonic() < deadline, run
        time.sleep(0.05)
    (item,) = run["results"]
    assert item["status"] == "done", item
    synchronous = client.post(ROUTE, json=body).json()
    item["result"].pop("elapsed_s"), synchronous.pop("elapsed_s")
    assert item["result"] == synchronous


def test_samples_behind_the_figures_are_counted(make_client):
    client = make_client()
    client.post(ROUTE, json=_request())
    text = client.get("/metrics").text
    assert 'tailgauge_samples_drawn_total{resource="ruin"} 2000.0' in text


# --- refusals ---------------------------------------------------------------------------------


def _process(**fields: Any) -> dict[str, Any]:
    return {k: v for k, v in {**EXPONENTIAL, **fields}.items() if v is not None}


@pytest.mark.parametrize(
    ("fields", "expected"),
    [
        ({"process": _process(premium_rate=150000.0)}, _error(
            ["body", "process", "loading"], "give either loading or premium_rate, not both",
            "premium_conflict")),
        ({"process": _process(loading=None)}, _error(
            ["body", "process", "loading"],
            "Field required: give loading (theta) or premium_rate (c)", "missing")),
        ({"process": _process(severity={"family": "pareto", "alpha": 1.0, "scale": 10.0})},
         _error(["body", "process", "severity"],
                "has an infinite mean claim, but a ruin process needs a finite mean claim; give "
                "a retention (the insurer then pays min(X, retention)), or a lighter tail (e.g. "
                "Pareto alpha > 1)", "parameter_error")),
        ({"process": _process(severity={"family": "normal", "mean": 10.0, "sd": 1.0})},
         _error(["body", "process", "severity"],
                "claims must be >= 0; the normal law reaches below 0", "parameter_error")),
        ({"process": _process(loading=-1.0)}, _error(
            ["body", "process", "loading"], "Input should be greater than -1", "greater_than")),
        ({"capital": [1000.0, -1.0]}, _error(
            ["body", "capital", 1], "Input should be greater than or equal to 0",
            "greater_than_equal")),
        ({"capital": []}, _error(
            ["body", "capital"], "List should have at least 1 item after validation, not 0",
            "too_short")),
        ({"horizon": 0.0}, _error(["body", "horizon"], "Input should be greater than 0",
                                  "greater_than")),
        ({"horizon": -3.0}, _error(["body", "horizon"], "Input should be greater than 0",
                                   "greater_than")),
        ({"target_probability": 1.0}, _error(
            ["body", "target_probability"], "Input should be less than 1", "less_than")),
        ({"target_probability": 0.0}, _error(
            ["body", "target_probability"], "Input should be greater than 0", "greater_than")),
        ({"method": "annealing"}, _error(
            ["body", "method"],
            "Input should be 'auto', 'crude', 'tilted', 'conditional', 'conditional_is' or "
            "'recursion'", "literal_error")),
        ({"method": "recursion", "horizon": 5.0}, _error(
            ["body", "horizon"],
            "method recursion bounds the infinite-horizon ruin probability (the Pollaczek-"
            "Khinchine sum) only; leave horizon out, or use auto, tilted, conditional or crude "
            "with a horizon", "method_error")),
        ({"process": _process(severity={"family": "lognormal", "mu": 7.0, "sigma": 1.0}),
          "method": "tilted"}, _error(
            ["body", "method"],
            "tilted (Siegmund's algorithm) needs light-tailed claims with an adjustment "
            "coefficient; use auto or conditional, or give a retention", "method_error")),
        ({"horizon": 1e4}, _error(
            ["body", "horizon"],
            "gives 500000 expected claims per path (claim_rate x horizon); at most 100000 are "
            "allowed (server limit max_expected_claims)", "limit_exceeded")),
    ],
    ids=["both-premiums", "no-premium", "alpha-1", "negative-claims", "loading-minus-1",
         "negative-capital", "no-capital", "zero-horizon", "negative-horizon", "target-1",
         "target-0", "unknown-method", "recursion-horizon", "tilted-heavy", "long-horizon"],
)
def test_bad_requests_are_refused_with_the_field_and_the_reason(client, fields, expected):
    response = client.post(ROUTE, json=_request(**fields))
    assert response.status_code == 422, response.text
    assert response.json() == expected


def test_too_many_capitals_are_refused_naming_the_limit(make_client):
    client = make_client(max_thresholds=3)
    response = client.post(ROUTE, json=_request(capital=[1.0, 2.0, 3.0, 4.0]))
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", "capital"], "holds 4 items; at most 3 are allowed (server limit "
        "max_thresholds)", "limit_exceeded")
