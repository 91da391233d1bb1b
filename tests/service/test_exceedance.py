"""POST /v1/exceedance end to end (thread pool): figures, seeds, limits and warnings."""

from __future__ import annotations

import json
import math
import time
from typing import Any

from scipy import stats

import core
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult

CONTRACT_ESTIMATE_FIELDS = {
    "threshold", "probability", "std_error", "relative_error", "ci_low", "ci_high", "samples",
    "diagnostics",
}
CONTRACT_DIAGNOSTICS_FIELDS = {
    "pareto_k", "effective_samples", "largest_share", "batch_ratio", "reliable", "reason",
}


def _line(count: dict[str, Any], severity: dict[str, Any], **layer: float) -> dict[str, Any]:
    return {"count": count, "severity": severity, **layer}


def _request(lines: list[dict[str, Any]], thresholds: list[float], **extra: Any) -> dict:
    return {"portfolio": {"lines": lines}, "thresholds": thresholds, **extra}


def _within(estimate: dict[str, Any], exact: float, z: float = 4.5) -> bool:
    # Tolerance from the reported standard error (z = 4.5 over a few thresholds keeps the
    # false-alarm rate far below 1e-4 with the fixed seed anyway).
    return abs(estimate["probability"] - exact) <= z * estimate["std_error"]


def test_response_carries_the_contract_fields(client, small_request):
    response = client.post("/v1/exceedance", json=small_request())
    assert response.status_code == 200
    body = response.json()
    assert {"method", "seed", "elapsed_s", "warnings", "estimates"} <= body.keys()
    assert {"engine_version", "method_reason", "stopped_by", "mean", "std_dev"} <= body.keys()
    assert body["engine_version"] == core.ENGINE_VERSION
    for estimate in body["estimates"]:
        assert CONTRACT_ESTIMATE_FIELDS | {"hits"} <= estimate.keys()
        # the contract's diagnostics plus the additive `exact` flag (issue 12)
        assert set(estimate["diagnostics"]) == CONTRACT_DIAGNOSTICS_FIELDS | {"exact"}
        assert estimate["diagnostics"]["exact"] is False  # Monte Carlo is never exact
    assert [e["threshold"] for e in body["estimates"]] == [5.0, 20.0]


def test_sum_of_three_exponential_claims_matches_the_gamma_law(client):
    # Reference: a sum of n independent exponential(mean m) claims is gamma(n, scale m)
    # (closed form; scipy.stats.gamma).
    thresholds = [30.0, 80.0, 150.0]
    body = _request(
        [_line({"kind": "fixed", "n": 3}, {"family": "exponential", "mean": 10.0})],
        thresholds, precision={"samples": 4000}, seed=4,
    )
    result = client.post("/v1/exceedance", json=body).json()
    exact = stats.gamma(a=3, scale=10.0).sf(thresholds)
    for estimate, p in zip(result["estimates"], exact, strict=True):
        assert _within(estimate, p), (estimate, p)
    assert math.isclose(result["mean"], 30.0, rel_tol=1e-12)  # n * mean
    assert math.isclose(result["std_dev"], math.sqrt(300.0), rel_tol=1e-12)  # sqrt(n) * mean


def test_per_claim_layer_is_applied_as_written(client):
    # One Pareto claim, layer 1000 xs 50: the paid amount exceeds x < 1000 exactly when
    # X > x + 50, so P = (1 + (x + 50)/scale)^-alpha (the contract's Pareto survival); the
    # paid amount never exceeds the limit.
    body = _request(
        [_line({"kind": "fixed", "n": 1}, {"family": "pareto", "alpha": 2.0, "scale": 100.0},
               retention=50.0, limit=1000.0)],
        [200.0, 1500.0], method="crude", precision={"samples": 4000}, seed=11,
    )
    below, beyond = client.post("/v1/exceedance", json=body).json()["estimates"]
    assert _within(below, (1 + 250.0 / 100.0) ** -2.0)
    assert beyond["probability"] == 0.0 and beyond["hits"] == 0
    # Nothing observed: a one-sided bound, not "0 +- 0".
    assert beyond["std_error"] is None and beyond["ci_high"] > 0.0


def test_same_seed_gives_identical_figures(client, small_request):
    first = client.post("/v1/exceedance", json=small_request(seed=99)).json()
    second = client.post("/v1/exceedance", json=small_request(seed=99)).json()
    first.pop("elapsed_s"), second.pop("elapsed_s")
    assert first == second


def test_seed_is_drawn_json_safe_and_replays(client, small_request):
    body = small_request()
    del body["seed"]
    drawn = client.post("/v1/exceedance", json=body).json()
    seed = drawn["seed"]
    assert isinstance(seed, int) and 0 <= seed <= 2**53 - 1
    replay = client.post("/v1/exceedance", json={**body, "seed": seed}).json()
    assert replay["estimates"] == drawn["estimates"]


def test_engine_error_is_a_422_at_the_field(client, small_request):
    # Tilting needs a moment generating function; the engine refuses a Pareto line with a
    # MethodError naming "method".
    body = small_request(method="tilted")
    body["portfolio"]["lines"][0]["severity"] = {"family": "pareto", "alpha": 1.5, "scale": 1.0}
    response = client.post("/v1/exceedance", json=body)
    assert response.status_code == 422
    detail = response.json()["detail"]
    assert [(d["loc"], d["type"]) for d in detail] == [(["body", "method"], "method_error")]
    assert "light-tailed" in detail[0]["msg"]


def _strict_json(text: str) -> Any:
    def refuse(constant: str) -> None:
        raise AssertionError(f"non-JSON constant {constant} in the response")

    return json.loads(text, parse_constant=refuse)


def _broken_result(*_: Any, **__: Any) -> ExceedanceResult:
    nan, inf = math.nan, math.inf
    diagnostics = Diagnostics(pareto_k=nan, effective_samples=inf, largest_share=nan,
                              batch_ratio=-inf, reliable=False, reason="test")
    estimate = ExceedanceEstimate(threshold=1.0, value=nan, std_error=inf, relative_error=nan,
                                  ci_low=-inf, ci_high=inf, samples=100, hits=1,
                                  diagnostics=diagnostics)
    return ExceedanceResult(method="crude", method_reason="test", seed=1, elapsed_s=nan,
                            stopped_by="samples", mean=inf, std_dev=nan, estimates=[estimate])


def test_non_finite_engine_figures_become_null(client, small_request, monkeypatch):
    monkeypatch.setattr(core, "estimate_exceedance", _broken_result)
    response = client.post("/v1/exceedance", json=small_request(thresholds=[1.0]))
    assert response.status_code == 200
    body = _strict_json(response.text)
    estimate = body["estimates"][0]
    assert [estimate[k] for k in ("probability", "std_error", "relative_error", "ci_low",
                                  "ci_high")] == [None] * 5
    assert set(estimate["diagnostics"].values()) >= {None}
    assert body["mean"] is None and body["std_dev"] is None and body["elapsed_s"] is None
    assert any("non-finite" in w for w in body["warnings"])


# --- server limits ---------------------------------------------------------------------------


def test_samples_over_the_server_cap_are_refused_naming_the_limit(make_client, small_request):
    client = make_client(max_samples=5000)
    response = client.post("/v1/exceedance", json=small_request(precision={"samples": 10000}))
    assert response.status_code == 422
    assert response.json() == {"detail": [{
        "loc": ["body", "precision", "samples"],
        "msg": "must be at most 5000 (server limit max_samples)",
        "type": "limit_exceeded",
    }]}


def test_time_limit_over_the_server_limit_is_refused(client, small_request):
    body = small_request(precision={"samples": 2000, "time_limit_s": 600.0})
    assert client.post("/v1/exceedance", json=body).json() == {"detail": [{
        "loc": ["body", "precision", "time_limit_s"],
        "msg": "must be at most 60 s (server limit time_limit_s)",
        "type": "limit_exceeded",
    }]}


def test_as_precise_as_possible_is_capped_with_warnings(make_client, small_request):
    # relative_error without max_samples: the server's budgets apply instead of a 422.
    client = make_client(max_samples=2000)
    body = small_request(precision={"relative_error": 0.0001, "time_limit_s": 600.0})
    response = client.post("/v1/exceedance", json=body)
    assert response.status_code == 200
    result = response.json()
    assert result["stopped_by"] == "max_samples"
    assert "precision.time_limit_s capped at the server limit of 60 s" in result["warnings"]
    assert (
        "stopped at the server's cap of 2000 samples per sample set before every estimate "
        "reached relative_error 0.0001"
    ) in result["warnings"]
    assert max(e["samples"] for e in result["estimates"]) <= 2000


def test_too_many_expected_claims_are_refused(client, small_request):
    body = small_request()
    body["portfolio"]["lines"][0]["count"] = {"kind": "poisson", "mean": 250000.0}
    assert client.post("/v1/exceedance", json=body).json() == {"detail": [{
        "loc": ["body", "portfolio"],
        "msg": "expects 250000 paid claims per period; at most 100000 are allowed "
               "(server limit max_expected_claims)",
        "type": "limit_exceeded",
    }]}


def test_too_many_lines_are_refused(client, small_request):
    body = small_request()
    body["portfolio"]["lines"] = body["portfolio"]["lines"] * 201
    assert client.post("/v1/exceedance", json=body).json() == {"detail": [{
        "loc": ["body", "portfolio", "lines"],
        "msg": "holds 201 items; at most 200 are allowed (server limit max_lines)",
        "type": "limit_exceeded",
    }]}


def test_engine_overrunning_the_wall_limit_gets_503(make_client, small_request, monkeypatch):
    def slow(*_: Any, **__: Any) -> None:
        time.sleep(1.0)

    monkeypatch.setattr(core, "estimate_exceedance", slow)
    client = make_client(time_limit_s=0.2, time_limit_grace_s=0.0)
    response = client.post("/v1/exceedance", json=small_request())
    assert response.status_code == 503
    assert response.json() == {"detail": [{
        "loc": ["body", "precision", "time_limit_s"],
        "msg": "the computation did not finish within the server's wall-time limit of 0.2 s",
        "type": "time_limit",
    }]}
