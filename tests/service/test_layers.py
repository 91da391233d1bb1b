"""POST /v1/layers end to end (thread pool): layer losses and attachment / exhaustion
probabilities against closed forms; bad input; seeds; honest figures when nothing is hit."""

from __future__ import annotations

import asyncio
import json
from typing import Any

import numpy as np
import pytest
from scipy import stats

from service import pipeline
from service.resources import KINDS

ROUTE = "/v1/layers"
CONTRACT_LAYER_FIELDS = {
    "attachment", "limit", "expected_loss", "expected_loss_ci_low", "expected_loss_ci_high",
    "probability_attach", "probability_exhaust", "diagnostics",
}
# Compound Poisson (mean 3) exponential claims (mean 2).
POISSON_EXPONENTIAL = {"lines": [{"count": {"kind": "poisson", "mean": 3.0},
                                  "severity": {"family": "exponential", "mean": 2.0}}]}


def _request(**fields: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "portfolio": POISSON_EXPONENTIAL,
        "layers": [{"attachment": 10.0, "limit": 10.0}, {"attachment": 20.0, "limit": None}],
        "precision": {"samples": 4000},
        "seed": 31,
    }
    body.update(fields)
    return body


def _error(loc: list[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"detail": [{"loc": loc, "msg": msg, "type": type_}]}


def _covers(out: dict[str, Any], name: str, exact: float, k: float = 4.0) -> bool:
    """Within k standard errors, the standard error read off the 95% interval (the larger
    half-width / 1.96): several checks per test, hence 4 rather than the interval itself."""
    value, low, high = out[name], out[f"{name}_ci_low"], out[f"{name}_ci_high"]
    se = max(value - low, high - value) / 1.959963984540054
    return abs(value - exact) <= k * se


# Reference: compound Poisson exponential claims are a Poisson mixture of gamma laws (a sum of
# n exponential(mean m) claims is gamma(n, scale m)); P(S > a) = sum_n p_n gamma(n, m).sf(a) and
# the stop-loss transform E[(G_n - a)+] = n m gamma(n + 1, m).sf(a) - a gamma(n, m).sf(a)
# (closed form). A layer's loss is the difference of the stop-loss at its two ends.
_N = np.arange(1, 300)


def _exceedance(lam: float, mean: float, a: float) -> float:
    pn = stats.poisson(lam).pmf(_N)
    return float(np.sum(pn * stats.gamma(_N, scale=mean).sf(a)))


def _stop_loss(lam: float, mean: float, a: float) -> float:
    pn = stats.poisson(lam).pmf(_N)
    sl = (_N * mean * stats.gamma(_N + 1, scale=mean).sf(a)
          - a * stats.gamma(_N, scale=mean).sf(a))
    return float(np.sum(pn * sl))


def test_response_carries_the_contract_fields(client):
    response = client.post(ROUTE, json=_request())
    assert response.status_code == 200, response.text
    body = response.json()
    assert {"method", "seed", "elapsed_s", "warnings", "engine_version", "method_reason",
            "stopped_by", "samples", "mean", "std_dev", "layers"} <= body.keys()
    limited, unlimited = body["layers"]
    for out in body["layers"]:
        assert CONTRACT_LAYER_FIELDS <= out.keys()
        assert out["expected_loss"] >= 0.0
        assert 0.0 <= out["probability_attach_ci_low"] <= out["probability_attach"]
        assert out["probability_attach"] <= out["probability_attach_ci_high"] <= 1.0
    assert (limited["attachment"], limited["limit"]) == (10.0, 10.0)
    assert unlimited["limit"] is None
    assert unlimited["probability_exhaust"] is None
    assert unlimited["probability_exhaust_ci_low"] is None
    assert unlimited["probability_exhaust_ci_high"] is None


def test_layer_figures_match_the_poisson_gamma_mixture(client):
    lam, mean = 3.0, 2.0
    body = _request(layers=[{"attachment": 10.0, "limit": 10.0}, {"attachment": 15.0,
                                                                 "limit": 5.0},
                            {"attachment": 20.0}], precision={"samples": 20000}, seed=6)
    result = client.post(ROUTE, json=body).json()
    for out in result["layers"]:
        a, limit = out["attachment"], out["limit"]
        top_loss = 0.0 if limit is None else _stop_loss(lam, mean, a + limit)
        assert _covers(out, "expected_loss", _stop_loss(lam, mean, a) - top_loss), out
        assert _covers(out, "probability_attach", _exceedance(lam, mean, a)), out
        if limit is not None:
            assert _covers(out, "probability_exhaust", _exceedance(lam, mean, a + limit)), out
    assert result["mean"] == pytest.approx(lam * mean, rel=1e-12)  # E[N] E[X]


def test_recursion_bounds_bracket_the_poisson_gamma_mixture(client):
    # method=recursion: rigorous lower and upper bounds, no standard error, no samples.
    result = client.post(ROUTE, json=_request(method="recursion")).json()
    assert result["method"] == "recursion" and result["warnings"] == []
    for out in result["layers"]:
        a, limit = out["attachment"], out["limit"]
        top_loss = 0.0 if limit is None else _stop_loss(3.0, 2.0, a + limit)
        exact = _stop_loss(3.0, 2.0, a) - top_loss
        assert out["expected_loss_ci_low"] <= exact <= out["expected_loss_ci_high"]
        attach = _exceedance(3.0, 2.0, a)
        assert out["probability_attach_ci_low"] <= attach <= out["probability_attach_ci_high"]
        assert out["expected_loss_std_error"] is None
        # the headline figures lie between their bounds
        for name in ("expected_loss", "probability_attach"):
            assert out[f"{name}_ci_low"] <= out[name] <= out[f"{name}_ci_high"]


def test_adjacent_layers_add_up_to_the_combined_layer(client):
    # Fact of the trade: 10 xs 10 plus 10 xs 20 is 20 xs 10; on one sample set, per-sample
    # additivity leaves only rounding between the two sides.
    body = _request(layers=[{"attachment": 10.0, "limit": 10.0},
                            {"attachment": 20.0, "limit": 10.0},
                            {"attachment": 10.0, "limit": 20.0}])
    low, high, both = client.post(ROUTE, json=body).json()["layers"]
    assert low["expected_loss"] + high["expected_loss"] == pytest.approx(
        both["expected_loss"], rel=1e-9)
    # The lower layer is exhausted exactly when the upper one attaches.
    assert low["probability_exhaust"] == pytest.approx(high["probability_attach"], rel=1e-12)


def test_limited_layer_of_an_infinite_mean_claim_matches_its_integral(client):
    # One Pareto claim with alpha 0.8 (infinite mean): a limited layer still has a finite loss,
    # E[min((X - a)+, l)] = integral of the survival (1 + x)^-0.8 from a to a + l
    # = ((1 + a + l)^0.2 - (1 + a)^0.2) / 0.2 (closed form; the standard layer formula).
    body = _request(
        portfolio={"lines": [{"count": {"kind": "fixed", "n": 1},
                              "severity": {"family": "pareto", "alpha": 0.8, "scale": 1.0}}]},
        layers=[{"attachment": 10.0, "limit": 10.0}], method="crude",
        precision={"samples": 20000},
    )
    response = client.post(ROUTE, json=body)
    assert response.status_code == 200, response.text
    (out,) = response.json()["layers"]
    assert _covers(out, "expected_loss", (21.0**0.2 - 11.0**0.2) / 0.2), out
    assert _covers(out, "probability_attach", 11.0**-0.8), out
    assert _covers(out, "probability_exhaust", 21.0**-0.8), out


def test_unlimited_layer_of_an_infinite_mean_claim_is_refused(client):
    body = _request(
        portfolio={"lines": [{"count": {"kind": "poisson", "mean": 1.0},
                              "severity": {"family": "pareto", "alpha": 1.0, "scale": 5.0}}]},
        layers=[{"attachment": 10.0, "limit": 5.0}, {"attachment": 50.0}],
    )
    response = client.post(ROUTE, json=body)
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", "portfolio", "lines", 0, "severity"],
        "has an infinite mean claim, so the expected loss of the unlimited layers[1] does not "
        "exist; give the line a per-claim limit, or use a lighter tail (e.g. Pareto alpha > 1)",
        "method_error",
    )


def test_layer_of_a_line_with_negative_claims_is_refused_at_the_layer(client):
    # Poisson(5) normal(-10, 1): P(S > 0) = poisson.pmf(1, 5) * norm.sf(10) + ... = 2.6e-25
    # (scipy), which the estimators missed by 36 orders of magnitude: a 422, not a figure.
    body = _request(
        portfolio={"lines": [{"count": {"kind": "poisson", "mean": 5.0},
                              "severity": {"family": "normal", "mean": -10.0, "sd": 1.0}}]},
        layers=[{"attachment": 0.0, "limit": 10.0}],
    )
    response = client.post(ROUTE, json=body)
    assert response.status_code == 422
    detail = response.json()["detail"][0]
    assert detail["loc"] == ["body", "layers", 0]
    assert "negative claims" in detail["msg"] and "retention" in detail["msg"]
    exceed = client.post("/v1/exceedance", json={
        "portfolio": body["portfolio"], "thresholds": [-40.0], "precision": {"samples": 4000},
        "seed": 3})
    assert exceed.status_code == 200


def test_layer_beyond_every_sample_gets_one_sided_bounds(client):
    # One exponential(1) claim: P(X > 60) = e^-60 (closed form), which 4000 crude samples
    # cannot see. The answer says so: 0 with the same one-sided 95% bound as /v1/exceedance,
    # the exact binomial (Clopper-Pearson 1934) bound for zero hits 1 - 0.05^(1/n), about
    # 3/n (the rule of three), not "0 +- 0".
    body = _request(
        portfolio={"lines": [{"count": {"kind": "fixed", "n": 1},
                              "severity": {"family": "exponential", "mean": 1.0}}]},
        layers=[{"attachment": 60.0, "limit": 10.0}, {"attachment": 70.0}], method="crude",
    )
    result = client.post(ROUTE, json=body).json()
    limited, unlimited = result["layers"]
    bound = 1.0 - 0.05 ** (1.0 / 4000)
    assert limited["probability_attach"] == 0.0
    assert limited["probability_attach_ci_high"] == pytest.approx(bound, rel=1e-12)
    assert limited["expected_loss"] == 0.0
    assert limited["expected_loss_ci_high"] == pytest.approx(10.0 * bound, rel=1e-12)
    assert unlimited["expected_loss_ci_high"] is None  # no finite bound without a limit
    assert ("layers[0] (10 xs 60): no sample reached the attachment; the figures are 0 with "
            "one-sided upper bounds") in result["warnings"]
    assert any(w.startswith("layers[1] (unlimited xs 70): no sample") for w in result["warnings"])


def test_same_seed_gives_identical_figures(client):
    first = client.post(ROUTE, json=_request(seed=5)).json()
    second = client.post(ROUTE, json=_request(seed=5)).json()
    first.pop("elapsed_s"), second.pop("elapsed_s")
    assert first == second


def test_batch_handler_gives_the_endpoint_answer(client):
    body = _request()
    over_http = client.post(ROUTE, json=body).json()
    kind = KINDS["layers"]
    state = client.app.state
    context = pipeline.Context(settings=state.settings, pool=state.pool, metrics=state.metrics)
    direct = asyncio.run(pipeline.run(kind, kind.request.model_validate(body), context))
    over_http.pop("elapsed_s")
    assert direct.model_dump(exclude={"elapsed_s"}) == over_http


def test_responses_hold_no_nan_or_infinity(client):
    def refuse(constant: str) -> None:
        raise AssertionError(f"non-JSON constant {constant} in the response")

    body = _request(
        portfolio={"lines": [{"count": {"kind": "poisson", "mean": 2.0},
                              "severity": {"family": "pareto", "alpha": 1.5, "scale": 1.0}}]},
    )
    result = json.loads(client.post(ROUTE, json=body).text, parse_constant=refuse)
    assert result["std_dev"] is None  # infinite for alpha <= 2: null, not Infinity


# --- refusals ---------------------------------------------------------------------------------


@pytest.mark.parametrize(("layer", "loc", "msg", "type_"), [
    ({"attachment": -1.0, "limit": 5.0}, "attachment",
     "Input should be greater than or equal to 0", "greater_than_equal"),
    ({"attachment": 1.0, "limit": 0.0}, "limit", "Input should be greater than 0",
     "greater_than"),
    ({"attachment": 1.0, "limit": -5.0}, "limit", "Input should be greater than 0",
     "greater_than"),
])
def test_bad_layers_are_refused_at_the_field(client, layer, loc, msg, type_):
    body = _request(layers=[{"attachment": 10.0, "limit": 10.0}, layer])
    response = client.post(ROUTE, json=body)
    assert response.status_code == 422
    assert response.json() == _error(["body", "layers", 1, loc], msg, type_)


def test_empty_layer_list_is_refused(client):
    assert client.post(ROUTE, json=_request(layers=[])).json() == _error(
        ["body", "layers"], "List should have at least 1 item after validation, not 0",
        "too_short")


def test_too_many_layers_are_refused_naming_the_limit(make_client):
    client = make_client(max_thresholds=2)
    body = _request(layers=[{"attachment": float(a), "limit": 1.0} for a in range(3)])
    assert client.post(ROUTE, json=body).json() == _error(
        ["body", "layers"], "holds 3 items; at most 2 are allowed (server limit max_thresholds)",
        "limit_exceeded")
