"""Credit portfolios over HTTP: lines of obligors on factors through exceedance, risk measures
(with Euler contributions), layers (tranches) and runs; every refusal is a 422 naming its field."""

from __future__ import annotations

import copy
import math
from typing import Any

from api_calls import one_refusal, wait_for_run
from fastapi.testclient import TestClient
from scipy import integrate, stats

# One factor, 1000 obligors: the first case.
ONE_FACTOR = {
    "lines": [{"label": "loans", "obligors": {
        "count": 1000, "exposure": 1.0, "default_probability": 0.01,
        "loss_given_default": 0.45, "factor_loadings": [math.sqrt(0.2)]}}],
    "factors": {"count": 1},
}
TWO_LINES = {
    "lines": [
        {"label": "bonds", "obligors": [
            {"label": "bonds A", "count": 300, "exposure": 2.0, "default_probability": 0.002,
             "loss_given_default": 0.6, "factor_loadings": [0.4, 0.1]},
            {"count": 100, "exposure": 5.0, "default_probability": 0.01,
             "loss_given_default": {"family": "beta", "mean": 0.5, "sd": 0.2},
             "factor_loadings": [0.5, 0.0]}]},
        {"label": "loans", "obligors": {
            "count": 500, "exposure": 1.0, "default_probability": 0.02,
            "loss_given_default": 0.4, "factor_loadings": [0.2, 0.4]}},
    ],
    "factors": {"count": 2, "correlation": [[1.0, 0.3], [0.3, 1.0]]},
}


def _body(portfolio: dict[str, Any], **fields: Any) -> dict[str, Any]:
    return {"portfolio": copy.deepcopy(portfolio), "precision": {"samples": 4000}, "seed": 7,
            **fields}


def test_exceedance_of_one_factor_book_matches_quadrature(client: TestClient) -> None:
    # Reference: scipy.integrate.quad over the factor of scipy.stats.binom tails (L > 100 means
    # more than 222 defaults), as in tests/reference/credit_references.py.
    c, rho = stats.norm.ppf(0.01), 0.2
    ref = integrate.quad(lambda z: stats.norm.pdf(z) * stats.binom.sf(
        222, 1000, stats.norm.cdf((c - math.sqrt(rho) * z) / math.sqrt(1 - rho))),
        -12, 12, points=[-4, -2, 0], limit=400, epsabs=0, epsrel=1e-10)[0]
    r = client.post("/v1/exceedance", json=_body(ONE_FACTOR, thresholds=[100.0, 500.0],
                                                  precision={"samples": 20000}))
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["method"] == "glasserman_li"
    near, impossible = out["estimates"]
    assert abs(near["probability"] - ref) <= 4 * near["std_error"]
    assert impossible["probability"] == 0.0 and impossible["ci_high"] == 0.0
    assert out["mean"] == 4.5  # 1000 obligors x PD 1% x LGD 0.45


def test_risk_measures_carry_contributions_summing_to_tvar(client: TestClient) -> None:
    r = client.post("/v1/risk-measures", json=_body(TWO_LINES, levels=[0.99, 0.999]))
    assert r.status_code == 200, r.text
    for m in r.json()["measures"]:
        parts = m["contributions"]
        assert [p["label"] for p in parts] == ["bonds A", "bonds group 1", "loans"]
        assert math.isclose(sum(p["tvar_contribution"] for p in parts), m["tvar"],
                            rel_tol=1e-9)
        for p in parts:
            assert p["ci_low"] <= p["tvar_contribution"] <= p["ci_high"]


def test_claim_portfolios_keep_an_empty_contribution_list(client: TestClient) -> None:
    body = {"portfolio": {"lines": [{"count": {"kind": "fixed", "n": 5},
                                     "severity": {"family": "exponential", "mean": 1.0}}]},
            "levels": [0.99], "precision": {"samples": 2000}, "seed": 1}
    r = client.post("/v1/risk-measures", json=body)
    assert r.status_code == 200, r.text
    assert r.json()["measures"][0]["contributions"] == []


def test_tranches_are_layers_on_the_portfolio_loss(client: TestClient) -> None:
    layers = [{"attachment": 20.0, "limit": 20.0}, {"attachment": 40.0, "limit": None}]
    r = client.post("/v1/layers", json=_body(TWO_LINES, layers=layers))
    assert r.status_code == 200, r.text
    junior, senior = r.json()["layers"]
    assert junior["probability_exhaust"] == senior["probability_attach"]
    assert junior["expected_loss"] <= 20.0 * junior["probability_attach"]


def test_runs_accept_credit_items(client: TestClient) -> None:
    batch = {"name": "credit", "items": [
        {"id": "p", "kind": "exceedance", "request": _body(ONE_FACTOR, thresholds=[60.0])}]}
    accepted = client.post("/v1/runs", json=batch)
    assert accepted.status_code == 202, accepted.text
    run_id = accepted.json()["run_id"]
    run = wait_for_run(client, run_id, timeout=60)
    assert run["status"] == "done", run
    direct = client.post("/v1/exceedance", json=_body(ONE_FACTOR, thresholds=[60.0])).json()
    assert run["results"][0]["result"]["estimates"] == direct["estimates"]


def _refusal(client: TestClient, portfolio: dict[str, Any], **fields: Any) -> dict[str, Any]:
    return one_refusal(client.post("/v1/exceedance",
                                   json=_body(portfolio, thresholds=[10.0], **fields)))


def test_refusals_name_the_field(client: TestClient) -> None:
    base = ["body", "portfolio", "lines"]
    p = copy.deepcopy(TWO_LINES)
    p["lines"][0]["obligors"][1]["factor_loadings"] = [0.8, 0.7]
    e = _refusal(client, p)
    assert e["loc"] == [*base, 0, "obligors", 1, "factor_loadings"] and "b' R b" in e["msg"]
    p = copy.deepcopy(TWO_LINES)
    p["lines"][1]["obligors"]["factor_loadings"] = [0.3]
    e = _refusal(client, p)
    assert e["loc"] == [*base, 1, "obligors", 0, "factor_loadings"] and "2 entries" in e["msg"]
    for field, value, kind in (("default_probability", 1.0, "less_than"),
                               ("default_probability", 0.0, "greater_than"),
                               ("exposure", -1.0, "greater_than")):
        p = copy.deepcopy(ONE_FACTOR)
        p["lines"][0]["obligors"][field] = value
        e = _refusal(client, p)
        assert e["loc"] == [*base, 0, "obligors", 0, field] and e["type"] == kind
    p = copy.deepcopy(ONE_FACTOR)
    del p["factors"]
    assert _refusal(client, p)["loc"] == ["body", "portfolio", "factors"]
    p = copy.deepcopy(TWO_LINES)
    p["factors"]["correlation"] = [[1.0, 1.2], [1.2, 1.0]]
    e = _refusal(client, p)
    assert e["loc"] == ["body", "portfolio", "factors", "correlation", 0, 1], e
    p["factors"]["correlation"] = [[1.0, 0.5], [0.5, 1.0], [0.0, 0.0]]
    e = _refusal(client, p)
    assert e["loc"] == ["body", "portfolio", "factors", "correlation"] and "2 x 2" in e["msg"]
    mixed = copy.deepcopy(ONE_FACTOR)
    mixed["lines"].append({"count": {"kind": "fixed", "n": 1},
                           "severity": {"family": "exponential", "mean": 1.0}})
    # A claim line beside obligors loads on the factors (tests/service/test_mixed_book_api.py).
    e = _refusal(client, mixed)
    assert e["loc"] == [*base, 1, "factor_loadings"] and "required" in e["msg"]
    assert _refusal(client, ONE_FACTOR, method="recursion")["loc"] == ["body", "method"]
    assert _refusal(client, ONE_FACTOR, method="tilted")["loc"] == ["body", "method"]


def test_obligor_and_group_limits_are_server_settings(make_client: Any) -> None:
    client = make_client(max_obligors=999, max_obligor_groups=2)
    e = _refusal(client, ONE_FACTOR)
    assert e["type"] == "limit_exceeded" and "max_obligors" in e["msg"]
    e = _refusal(client, TWO_LINES)
    assert e["type"] == "limit_exceeded" and "max_obligor_groups" in e["msg"]


def test_student_t_copula_is_taken_from_dependence(client: TestClient) -> None:
    p = copy.deepcopy(ONE_FACTOR)
    p["dependence"] = {"copula": "student_t", "df": 5.0}
    r = client.post("/v1/exceedance", json=_body(p, thresholds=[300.0],
                                                  precision={"samples": 20000}))
    assert r.status_code == 200, r.text
    est = r.json()["estimates"][0]
    # Reference: 3.8163e-5, the 2-D quadrature one_factor_t_tail(1000, 0.01, 0.2, 0.45, 5, 300)
    # of tests/reference/credit_references.py (the gaussian copula gives about 1e-7 there).
    assert abs(est["probability"] - 3.816286967516208e-05) <= 4 * est["std_error"]
    p["dependence"] = {"copula": "student_t"}
    e = _refusal(client, p)
    assert e["loc"] == ["body", "portfolio", "dependence"]
