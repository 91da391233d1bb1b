"""POST /v1/risk-measures end to end (thread pool): VaR, TVaR, the exceedance curve by return
period and its inverse against closed forms; bad input; seeds; the batch code path."""

from __future__ import annotations

import asyncio
import json
import math
from typing import Any

import pytest
from scipy import stats

from core.errors import LimitError, ParameterError
from service import pipeline, translate
from service.resources import KINDS
from service.schemas.risk_measures import RiskMeasuresRequest

ROUTE = "/v1/risk-measures"
CONTRACT_MEASURE_FIELDS = {
    "level", "var", "var_ci_low", "var_ci_high", "tvar", "tvar_ci_low", "tvar_ci_high",
    "diagnostics",
}
DIAGNOSTICS_FIELDS = {
    "pareto_k", "effective_samples", "largest_share", "batch_ratio", "reliable", "reason",
}
# 20 claims, each gamma(shape 2, scale 1).
GAMMA_SUM = {"lines": [{"count": {"kind": "fixed", "n": 20},
                        "severity": {"family": "gamma", "shape": 2.0, "scale": 1.0}}]}


def _request(**fields: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "portfolio": GAMMA_SUM, "levels": [0.99, 0.995], "precision": {"samples": 4000},
        "seed": 21,
    }
    body.update(fields)
    return body


def _error(loc: list[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"detail": [{"loc": loc, "msg": msg, "type": type_}]}


def _covers(value: float, low: float, high: float, exact: float, k: float = 4.0) -> bool:
    """Within k standard errors, the standard error read off the 95% interval (the larger
    half-width / 1.96): several checks per test, hence 4 rather than the interval itself."""
    se = max(value - low, high - value) / 1.959963984540054
    return abs(value - exact) <= k * se


def _strict_json(text: str) -> Any:
    def refuse(constant: str) -> None:
        raise AssertionError(f"non-JSON constant {constant} in the response")

    return json.loads(text, parse_constant=refuse)


def test_response_carries_the_contract_fields(client):
    response = client.post(ROUTE, json=_request())
    assert response.status_code == 200, response.text
    body = response.json()
    assert {"method", "seed", "elapsed_s", "warnings", "engine_version", "method_reason",
            "stopped_by", "samples", "mean", "std_dev", "measures", "curve",
            "loss_return_periods"} <= body.keys()
    assert body["samples"] == 4000 and body["seed"] == 21
    assert [m["level"] for m in body["measures"]] == [0.99, 0.995]
    for m in body["measures"]:
        assert CONTRACT_MEASURE_FIELDS <= m.keys()
        assert set(m["diagnostics"]) == DIAGNOSTICS_FIELDS | {"exact"}  # additive field, issue 12
    assert body["curve"] == [] and body["loss_return_periods"] == []


def test_gamma_sum_figures_match_the_gamma_law(client):
    # Reference: 20 iid gamma(2, 1) claims sum to gamma(40, 1) (closed form; scipy.stats.gamma).
    # VaR_q = ppf(q); TVaR_q = E[S; S > v] / (1 - q) with E[S; S > v] = 40 * gamma(41).sf(v)
    # (closed form of the gamma's partial mean); the loss at return period T is ppf(1 - 1/T)
    # and the return period of a loss x is 1 / sf(x).
    body = _request(levels=[0.99, 0.995, 0.999], return_periods=[20.0, 500.0],
                    losses=[50.0, 60.0], precision={"samples": 20000}, seed=3)
    result = client.post(ROUTE, json=body).json()
    law = stats.gamma(40.0)
    for m in result["measures"]:
        v = float(law.ppf(m["level"]))
        tvar = 40.0 * float(stats.gamma(41.0).sf(v)) / (1.0 - m["level"])
        assert _covers(m["var"], m["var_ci_low"], m["var_ci_high"], v), (m, v)
        assert _covers(m["tvar"], m["tvar_ci_low"], m["tvar_ci_high"], tvar), (m, tvar)
    for point, period in zip(result["curve"], [20.0, 500.0], strict=True):
        exact = float(law.ppf(1.0 - 1.0 / period))
        assert point["return_period"] == period and point["probability"] == 1.0 / period
        assert _covers(point["loss"], point["loss_ci_low"], point["loss_ci_high"], exact)
    for point, loss in zip(result["loss_return_periods"], [50.0, 60.0], strict=True):
        p = float(law.sf(loss))
        assert point["loss"] == loss
        assert _covers(point["probability"], point["probability_ci_low"],
                       point["probability_ci_high"], p), (point, p)
        assert point["return_period"] == pytest.approx(1.0 / point["probability"], rel=1e-12)
        assert point["return_period_ci_low"] <= point["return_period"]
        assert point["return_period"] <= point["return_period_ci_high"]
    assert result["mean"] == pytest.approx(40.0, rel=1e-12)  # n * shape * scale


def test_return_period_and_level_from_one_sample_set_agree_exactly(client):
    # Return period 200 years is the 0.995 level (T = 1 / (1 - q)): one sample set, one answer.
    result = client.post(ROUTE, json=_request(levels=[0.995], return_periods=[200.0])).json()
    (measure,), (point,) = result["measures"], result["curve"]
    assert point["loss"] == pytest.approx(measure["var"], rel=1e-12)
    assert point["loss_ci_low"] == pytest.approx(measure["var_ci_low"], rel=1e-12)


def test_measures_are_ordered_as_the_trade_expects(client):
    # Facts of the trade: VaR rises with the level, and TVaR >= VaR at every level.
    body = _request(
        portfolio={"lines": [{"count": {"kind": "poisson", "mean": 5.0},
                              "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.5}}]},
        levels=[0.9, 0.99, 0.999], precision={"samples": 10000},
    )
    measures = client.post(ROUTE, json=body).json()["measures"]
    vars_ = [m["var"] for m in measures]
    assert vars_ == sorted(vars_)
    for m in measures:
        assert m["var_ci_low"] <= m["var"] <= m["var_ci_high"]
        assert m["var"] <= m["tvar_ci_low"] <= m["tvar"] <= m["tvar_ci_high"]


def test_return_periods_alone_are_enough(client):
    result = client.post(ROUTE, json=_request(levels=[], return_periods=[100.0])).json()
    assert result["measures"] == [] and len(result["curve"]) == 1


def test_same_seed_gives_identical_figures_and_a_drawn_seed_replays(client):
    first = client.post(ROUTE, json=_request(seed=99, losses=[55.0])).json()
    second = client.post(ROUTE, json=_request(seed=99, losses=[55.0])).json()
    first.pop("elapsed_s"), second.pop("elapsed_s")
    assert first == second
    body = _request()
    del body["seed"]
    drawn = client.post(ROUTE, json=body).json()
    assert 0 <= drawn["seed"] <= 2**53 - 1
    assert client.post(ROUTE, json={**body, "seed": drawn["seed"]}).json()["measures"] == (
        drawn["measures"])


def test_batch_handler_gives_the_endpoint_answer(client):
    # pipeline.run(KINDS["risk_measures"], ...) is what batch runs call: the same body as over HTTP.
    body = _request(return_periods=[50.0], losses=[55.0])
    over_http = client.post(ROUTE, json=body).json()
    kind = KINDS["risk_measures"]
    state = client.app.state
    context = pipeline.Context(settings=state.settings, pool=state.pool, metrics=state.metrics)
    direct = asyncio.run(pipeline.run(kind, kind.request.model_validate(body), context))
    assert isinstance(direct, kind.response) and kind.request is RiskMeasuresRequest
    over_http.pop("elapsed_s")
    assert direct.model_dump(exclude={"elapsed_s"}) == over_http


def test_no_non_finite_numbers_in_a_heavy_tailed_response(client):
    # A Pareto line with alpha 1.5 has an infinite variance: std_dev is null, never Infinity.
    body = _request(
        portfolio={"lines": [{"count": {"kind": "poisson", "mean": 2.0},
                              "severity": {"family": "pareto", "alpha": 1.5, "scale": 1.0}}]},
        return_periods=[1000.0], losses=[1e6],
    )
    result = _strict_json(client.post(ROUTE, json=body).text)
    assert result["std_dev"] is None and result["mean"] == pytest.approx(4.0)  # 2 * 1/(1.5-1)
    assert all(math.isfinite(m["tvar"]) for m in result["measures"])


def test_samples_behind_the_figures_are_counted(make_client):
    client = make_client()
    client.post(ROUTE, json=_request())
    text = client.get("/metrics").text
    assert 'tailgauge_samples_drawn_total{resource="risk_measures"} 4000.0' in text


# --- refusals ---------------------------------------------------------------------------------


@pytest.mark.parametrize(("level", "msg", "type_"), [
    (1.0, "Input should be less than 1", "less_than"),
    (0.0, "Input should be greater than 0", "greater_than"),
    (-0.5, "Input should be greater than 0", "greater_than"),
])
def test_levels_outside_the_open_unit_interval_are_refused(client, level, msg, type_):
    response = client.post(ROUTE, json=_request(levels=[0.99, level]))
    assert response.status_code == 422
    assert response.json() == _error(["body", "levels", 1], msg, type_)


def test_empty_levels_without_return_periods_are_refused(client):
    expected = _error(
        ["body", "levels"],
        "List should have at least 1 item after validation, not 0 (levels may be empty only "
        "when return_periods are given)",
        "too_short",
    )
    assert client.post(ROUTE, json=_request(levels=[])).json() == expected
    body = _request()
    del body["levels"]
    assert client.post(ROUTE, json=body).json() == expected


def test_return_period_of_a_year_or_less_is_refused(client):
    response = client.post(ROUTE, json=_request(return_periods=[1.0]))
    assert response.json() == _error(
        ["body", "return_periods", 0], "Input should be greater than 1", "greater_than")


def test_too_many_levels_are_refused_naming_the_limit(make_client):
    client = make_client(max_thresholds=3)
    response = client.post(ROUTE, json=_request(levels=[0.9, 0.95, 0.99, 0.995]))
    assert response.status_code == 422
    assert response.json() == _error(
        ["body", "levels"], "holds 4 items; at most 3 are allowed (server limit max_thresholds)",
        "limit_exceeded",
    )
    response = client.post(ROUTE, json=_request(losses=[1.0, 2.0, 3.0, 4.0]))
    assert response.json()["detail"][0]["loc"] == ["body", "losses"]


def test_infinite_mean_line_is_refused_at_its_severity(client):
    # Pareto alpha <= 1: E[X] is infinite, so TVaR does not exist (whatever the estimator).
    lines = [GAMMA_SUM["lines"][0], {"count": {"kind": "poisson", "mean": 1.0},
                                     "severity": {"family": "pareto", "alpha": 0.9,
                                                  "scale": 10.0}}]
    for method in ("auto", "crude"):
        response = client.post(ROUTE, json=_request(portfolio={"lines": lines}, method=method))
        assert response.status_code == 422
        assert response.json() == _error(
            ["body", "portfolio", "lines", 1, "severity"],
            "has an infinite mean claim, so tail value-at-risk does not exist; give the line a "
            "per-claim limit, or use a lighter tail (e.g. Pareto alpha > 1)",
            "method_error",
        )


def test_infinite_mean_line_with_a_per_claim_limit_is_accepted(client):
    line = {"count": {"kind": "poisson", "mean": 1.0},
            "severity": {"family": "pareto", "alpha": 0.9, "scale": 10.0}, "limit": 1000.0}
    response = client.post(ROUTE, json=_request(portfolio={"lines": [line]}))
    assert response.status_code == 200, response.text


def test_recursion_bounds_bracket_the_gamma_law(client):
    # method=recursion: ci_low / ci_high are rigorous bounds (claims rounded down and up), so
    # the closed forms of the gamma(40, 1) sum (scipy.stats.gamma; TVaR as above) must lie
    # inside them, and there is no standard error.
    body = _request(method="recursion", levels=[0.99, 0.999], return_periods=[500.0],
                    losses=[60.0])
    result = client.post(ROUTE, json=body).json()
    assert result["method"] == "recursion" and result["samples"] == 0
    law = stats.gamma(40.0)
    for m in result["measures"]:
        v = float(law.ppf(m["level"]))
        tvar = 40.0 * float(stats.gamma(41.0).sf(v)) / (1.0 - m["level"])
        assert m["var_ci_low"] <= v <= m["var_ci_high"]
        assert m["tvar_ci_low"] <= tvar <= m["tvar_ci_high"]
        assert m["tvar_std_error"] is None
        # the headline figures lie between their bounds
        assert m["var_ci_low"] <= m["var"] <= m["var_ci_high"]
        assert m["tvar_ci_low"] <= m["tvar"] <= m["tvar_ci_high"]
    (point,) = result["curve"]
    assert point["loss_ci_low"] <= float(law.ppf(1.0 - 1.0 / 500.0)) <= point["loss_ci_high"]
    assert point["loss_ci_low"] <= point["loss"] <= point["loss_ci_high"]
    (loss,) = result["loss_return_periods"]
    assert loss["probability_ci_low"] <= float(law.sf(60.0)) <= loss["probability_ci_high"]
    assert loss["probability_ci_low"] <= loss["probability"] <= loss["probability_ci_high"]
    assert loss["std_error"] is None


def test_engine_errors_about_its_grid_points_name_the_request_field():
    # The engine calls its points "thresholds"; a risk-measures request has none.
    error = translate.renamed(LimitError("thresholds.3", "too far out"), "thresholds", "losses")
    assert (type(error), error.loc, error.message) == (LimitError, ("losses",), "too far out")
    other = ParameterError("precision.samples", "x")
    assert translate.renamed(other, "thresholds", "losses") is other
