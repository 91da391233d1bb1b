"""portfolio.dependence over HTTP: 422s that name the entry, and recursion refused at method."""

from __future__ import annotations

from typing import Any

from fastapi.testclient import TestClient

DEP = ["body", "portfolio", "dependence"]


def _body(corr: Any, **extra: Any) -> dict[str, Any]:
    line = {"count": {"kind": "fixed", "n": 1},
            "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.0}}
    return {"portfolio": {"lines": [line, line],
                          "dependence": {"copula": "gaussian", "correlation": corr, **extra}},
            "thresholds": [50.0], "precision": {"samples": 2000}, "seed": 1}


def _detail(client: TestClient, body: dict[str, Any]) -> dict[str, Any]:
    r = client.post("/v1/exceedance", json=body)
    assert r.status_code == 422, r.text
    [d] = r.json()["detail"]
    return d


def test_asymmetric_matrix_names_the_entry(client: TestClient) -> None:
    d = _detail(client, _body([[1.0, 0.6], [0.5, 1.0]]))
    assert d["loc"] == [*DEP, "correlation", 0, 1]
    assert "symmetric" in d["msg"] and "0.6 != 0.5" in d["msg"]


def test_wrong_size_and_diagonal_and_psd(client: TestClient) -> None:
    d = _detail(client, _body([[1.0]]))
    assert d["loc"] == [*DEP, "correlation"] and "2 x 2" in d["msg"]
    d = _detail(client, _body([[1.0, 0.2], [0.2, 0.9]]))
    assert d["loc"] == [*DEP, "correlation", 1, 1]
    three = _body([[1, 0.9, -0.9], [0.9, 1, 0.9], [-0.9, 0.9, 1]])
    three["portfolio"]["lines"].append(three["portfolio"]["lines"][0])
    d = _detail(client, three)
    assert d["loc"] == [*DEP, "correlation"] and "smallest eigenvalue is -0.8" in d["msg"]


def test_df_rules(client: TestClient) -> None:
    d = _detail(client, _body([[1.0, 0.2], [0.2, 1.0]], df=4.0))
    assert d["loc"] == [*DEP, "df"] and "gaussian" in d["msg"]
    body = _body([[1.0, 0.2], [0.2, 1.0]])
    body["portfolio"]["dependence"]["copula"] = "student_t"
    d = _detail(client, body)
    # the schema's own cross-field rule (shared with obligor lines) answers at dependence
    assert d["loc"] == DEP and "needs df" in d["msg"]


def test_recursion_is_refused_at_method(client: TestClient) -> None:
    body = _body([[1.0, 0.2], [0.2, 1.0]])
    body["method"] = "recursion"
    d = _detail(client, body)
    assert d["loc"] == ["body", "method"]


def test_dependent_exceedance_answers(client: TestClient) -> None:
    r = client.post("/v1/exceedance", json=_body([[1.0, 0.5], [0.5, 1.0]]))
    assert r.status_code == 200, r.text
    e = r.json()["estimates"][0]
    assert e["ci_low"] <= e["probability"] <= e["ci_high"]


def test_amount_only_method_on_compound_lines_is_refused_at_method(client: TestClient) -> None:
    line = {"count": {"kind": "poisson", "mean": 2.0},
            "severity": {"family": "gamma", "shape": 2.0, "scale": 1.0}}
    body = _body([[1.0, 0.5], [0.5, 1.0]])
    body["portfolio"]["lines"] = [line, line]
    for method in ("conditional", "conditional_is"):
        body["method"] = method
        d = _detail(client, body)
        assert d["loc"] == ["body", "method"]
        assert "correlated lognormal amounts" in d["msg"] and "mean_shift" in d["msg"]
