"""POST /v1/fit over HTTP (ASGI in process): the worked example end to end (claims -> fit ->
portfolio line -> VaR at 0.995 with the sampling interval and the one with parameter risk),
the contract's fields, and the 422s for bad data."""

from __future__ import annotations

import json
import math

import pytest

from bench import make_fit_example as example
from service.settings import DEFAULT_EXAMPLES_DIR

EXAMPLE = DEFAULT_EXAMPLES_DIR / "fit_commercial_property_fire.json"


def test_example_file_is_what_the_generator_writes():
    # The example is invented data drawn from known parameters by bench/make_fit_example.py.
    assert json.loads(EXAMPLE.read_text(encoding="utf-8")) == json.loads(
        json.dumps(example.make()))


@pytest.fixture(scope="module")
def fitted(client):
    body = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    response = client.post("/v1/fit", json=body)
    assert response.status_code == 200, response.text
    return response.json()


def test_example_fit_recovers_the_generating_parameters(fitted):
    lognormal = next(f for f in fitted["fits"] if f["family"] == "lognormal")
    p, se = lognormal["parameters"], lognormal["std_errors"]
    # The truth is known (the generator's constants): within 3 standard errors.
    assert abs(p["mu"] - example.TRUTH_MU) <= 3 * se["mu"]
    assert abs(p["sigma"] - example.TRUTH_SIGMA) <= 3 * se["sigma"]
    assert fitted["censored"] > 0 and fitted["claims"] == len(json.loads(
        EXAMPLE.read_text())["claims"])
    for f in fitted["fits"]:
        assert set(f["tests"]) == {"ks", "cvm", "ad", "replicates"}
        for k in ("ks", "cvm", "ad"):
            assert 0 < f["tests"][k]["p_value"] <= 1
        assert f["aic"] == pytest.approx(2 * len(f["parameters"]) - 2 * f["log_likelihood"])
        assert f["qq"]
    aics = [f["aic"] for f in fitted["fits"]]
    assert aics == sorted(aics)
    nb = next(c for c in fitted["count_fits"] if c["family"] == "negative_binomial")
    assert nb["count"]["kind"] == "negative_binomial"
    rate = nb["parameters"]["rate"]
    assert abs(rate - example.TRUTH_RATE) <= 3 * nb["std_errors"]["rate"]
    assert fitted["dispersion"]["df"] == len(example.EXPOSURES) - 1
    assert fitted["tail"]["gpd_shape"] and fitted["tail"]["hill_xi"] is not None


def test_fitted_line_gives_var_with_both_intervals(client, fitted):
    lognormal = next(f for f in fitted["fits"] if f["family"] == "lognormal")
    count = next(c for c in fitted["count_fits"] if c["family"] == "poisson")["count"]
    unc = dict(lognormal["parameter_uncertainty"], draws=20)
    request = {
        "portfolio": {"lines": [{"label": "commercial property fire", "count": count,
                                 "severity": lognormal["severity"],
                                 "parameter_uncertainty": unc}]},
        "levels": [0.995], "method": "crude", "precision": {"samples": 2000}, "seed": 11,
    }
    response = client.post("/v1/risk-measures", json=request)
    assert response.status_code == 200, response.text
    out = response.json()
    m = out["measures"][0]
    both = m["var_with_parameters"]
    assert out["parameter_draws"] == 20 and both["draws"] == 20
    # The combined interval contains the sampling interval and the parameter range.
    assert both["ci_low"] <= m["var_ci_low"] <= m["var"] <= m["var_ci_high"] <= both["ci_high"]
    assert both["ci_low"] <= both["parameter_ci_low"] <= both["parameter_ci_high"] <= both[
        "ci_high"]
    assert both["dominant"] in ("parameter", "sampling")
    # Without the field the request means what it meant before.
    del request["portfolio"]["lines"][0]["parameter_uncertainty"]
    plain = client.post("/v1/risk-measures", json=request).json()
    assert plain["measures"][0]["var"] == m["var"]
    assert plain["measures"][0]["var_with_parameters"] is None
    assert plain["parameter_draws"] is None


def test_spliced_severity_is_accepted_by_a_portfolio_line(client, fitted):
    spliced = next(f for f in fitted["fits"] if f["family"] == "spliced_lognormal")
    assert spliced["severity"]["family"] == "spliced"
    request = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 50},
                                        "severity": spliced["severity"]}]},
               "thresholds": [1e6], "method": "crude", "precision": {"samples": 2000},
               "seed": 3}
    response = client.post("/v1/exceedance", json=request)
    assert response.status_code == 200, response.text
    assert 0 <= response.json()["estimates"][0]["probability"] <= 1


def _claims(n: int = 30) -> list[float]:
    return [1.0 + 0.37 * i + (i % 7) * 0.9 for i in range(n)]


@pytest.mark.parametrize(("change", "loc"), [
    ({"claims": [1.0, 2.0, 3.0], "families": ["lognormal"]}, ["body", "claims"]),
    ({"claims": [*_claims()[:5], -1.0, *_claims()[6:]], "families": ["gamma"]},
     ["body", "claims", 5]),
    ({"reporting_threshold": 2.0}, ["body", "claims", 0]),
    ({"claims": [4.0] * 20}, ["body", "claims"]),
    ({"censored_at": [None] * 29 + [5.0]}, ["body", "claims", 29]),
    ({"families": ["spliced_lognormal"], "tail_threshold": 1e9}, ["body", "tail_threshold"]),
    ({"counts": [1, 2], "exposures": [1.0, 0.0]}, ["body", "exposures", 1]),
])
def test_bad_data_gets_a_422_naming_the_field(client, change, loc):
    body = {"claims": _claims(), "bootstrap": {"replicates": 5}, "seed": 1, **change}
    response = client.post("/v1/fit", json=body)
    assert response.status_code == 422, response.text
    assert response.json()["detail"][0]["loc"] == loc


def test_nan_is_refused_before_it_reaches_the_fitter(client):
    raw = '{"claims": [1.0, NaN, 3.0]}'
    response = client.post("/v1/fit", content=raw, headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"][:2] == ["body", "claims"] or response.json()[
        "detail"][0]["type"] == "json_invalid"


def test_fit_is_a_batch_kind(client):
    body = {"claims": _claims(), "families": ["lognormal"], "bootstrap": {"replicates": 5},
            "seed": 2}
    direct = client.post("/v1/fit", json=body).json()
    run = client.post("/v1/runs", json={"name": "fit check", "items": [
        {"id": "a", "kind": "fit", "request": body}]})
    assert run.status_code == 202, run.text
    run_id = run.json()["run_id"]
    import time

    for _ in range(200):
        got = client.get(f"/v1/runs/{run_id}").json()
        if got["status"] in ("done", "failed"):
            break
        time.sleep(0.05)
    assert got["status"] == "done", got
    result = got["results"][0]["result"]
    assert result["fits"][0]["parameters"] == direct["fits"][0]["parameters"]
    assert math.isfinite(result["fits"][0]["log_likelihood"])
