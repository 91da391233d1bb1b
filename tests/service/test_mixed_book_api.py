"""Mixed books over HTTP: a line of obligors and a claim line on one `portfolio.factors` (the
claim line loads on them through its `factor_loadings`), through exceedance, risk measures
(Euler parts per group and per line), layers (tranches) and runs, against references built
here from scipy alone; and the refusals, each a 422 naming its field."""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np
from api_calls import one_refusal, wait_for_run
from fastapi.testclient import TestClient
from scipy import integrate, optimize, stats

Z95 = 1.959963984540054
N, PD, LGD, RHO = 1000, 0.01, 0.45, 0.2  # the credit group of issue 15's first case
LAM, SHAPE, SCALE = 4.0, 2.0, 5.0  # the claim line: Poisson(4) claims of gamma(2, 5)


def book(b_credit: float, b_line: float) -> dict[str, Any]:
    return {"lines": [
        {"label": "loans", "obligors": {
            "count": N, "exposure": 1.0, "default_probability": PD,
            "loss_given_default": LGD, "factor_loadings": [b_credit]}},
        {"label": "storm", "count": {"kind": "poisson", "mean": LAM},
         "severity": {"family": "gamma", "shape": SHAPE, "scale": SCALE},
         "factor_loadings": [b_line]}],
        "factors": {"count": 1}}


def _body(portfolio: dict[str, Any], samples: int = 10_000, **fields: Any) -> dict[str, Any]:
    return {"portfolio": copy.deepcopy(portfolio), "precision": {"samples": samples},
            "seed": 11, **fields}


# --- references (scipy only) ----------------------------------------------------------------

_COUNTS = np.arange(1, 80)  # Poisson(4) claim counts; P(N >= 80) is below 1e-60
_W = stats.poisson.pmf(_COUNTS, LAM)


def line_sf(y: np.ndarray) -> np.ndarray:
    """P(S > y) of the claim line: the series over the claim count of gamma tails (a sum of n
    gamma(2, 5) claims is gamma(2 n, 5); scipy.stats)."""
    y = np.asarray(y, dtype=float)
    tail = (_W * stats.gamma.sf(np.maximum(y, 0.0)[..., None], _COUNTS * SHAPE,
                                scale=SCALE)).sum(axis=-1)
    return np.where(y < 0, 1.0, tail)


def line_tail_mean(y: np.ndarray) -> np.ndarray:
    """E[S 1{S > y}]: E[G 1{G > y}] = E G * P(G' > y) with G' gamma(2 n + 1, 5) (the
    size-biased gamma law)."""
    y = np.asarray(y, dtype=float)
    return (_W * _COUNTS * SHAPE * SCALE * stats.gamma.sf(
        np.maximum(y, 0.0)[..., None], _COUNTS * SHAPE + 1, scale=SCALE)).sum(axis=-1)


_K = np.arange(N + 1)
_PMF = stats.binom.pmf(_K, N, PD)  # zero loadings: the number of defaults is binomial


def independent_sf(x: float) -> float:
    """P(L + S > x) with zero loadings: the convolution of the binomial default law with the
    claim line's compound law (exact for the model)."""
    return float((_PMF * line_sf(x - LGD * _K)).sum())


def independent_tail_means(v: float) -> tuple[float, float]:
    """(E[L 1{L + S > v}], E[S 1{L + S > v}]) with zero loadings, by the same convolution."""
    return (float((_PMF * LGD * _K * line_sf(v - LGD * _K)).sum()),
            float((_PMF * line_tail_mean(v - LGD * _K)).sum()))


def one_factor_sf(x: float, b_credit: float, b_line: float) -> float:
    """P(L + S > x) on one factor Z: given Z the defaults are binomial with the conditional
    PD Phi((c - b Z) / sqrt(1 - b^2)) (Vasicek 1987), and with the line's loss F^{-1}(Phi(-Y))
    (its latent Y = b' Z + sqrt(1 - b'^2) e adverse when low, like an obligor's) S > y iff -Y
    exceeds Phi^{-1}(F(y)), a normal tail; integrated over Z by scipy.integrate.quad."""
    c = stats.norm.ppf(PD)
    level = stats.norm.isf(np.clip(line_sf(x - LGD * _K), 1e-300, 1.0))

    def f(z: float) -> float:
        p = stats.norm.cdf((c - b_credit * z) / math.sqrt(1.0 - b_credit**2))
        cond = stats.norm.sf((level + b_line * z) / math.sqrt(1.0 - b_line**2))
        return float((stats.binom.pmf(_K, N, p) * cond).sum() * stats.norm.pdf(z))

    return float(integrate.quad(f, -9, 9, limit=400, epsabs=0, epsrel=1e-9)[0])


# --- the figures ----------------------------------------------------------------------------


def test_zero_loadings_give_the_convolution_and_the_exact_moments(client: TestClient) -> None:
    # Reference: independent_sf (binomial law convolved with the Poisson-gamma compound law).
    # The thresholds put P near 3e-2, 1e-3 and 1e-7.
    xs = [100.0, 150.0, 250.0]
    r = client.post("/v1/exceedance", json=_body(book(0.0, 0.0), thresholds=xs))
    assert r.status_code == 200, r.text
    out = r.json()
    for x, e in zip(xs, out["estimates"], strict=True):
        ref = independent_sf(x)
        assert e["diagnostics"]["reliable"], e["diagnostics"]
        assert abs(e["probability"] - ref) <= 4 * e["std_error"], (x, e, ref)
        assert e["ci_low"] <= e["probability"] <= e["ci_high"]
    # Moments of independent parts: E L = n PD LGD, Var L = n PD (1 - PD) LGD^2 (binomial);
    # the compound line: E S = lam E X, Var S = lam E X^2 (compound Poisson).
    ex, ex2 = SHAPE * SCALE, SHAPE * (SHAPE + 1) * SCALE**2
    assert math.isclose(out["mean"], N * PD * LGD + LAM * ex, rel_tol=1e-12)
    sd = math.sqrt(N * PD * (1 - PD) * LGD**2 + LAM * ex2)
    assert math.isclose(out["std_dev"], sd, rel_tol=1e-9)


def test_loadings_on_one_factor_match_quadrature(client: TestClient) -> None:
    # Reference: one_factor_sf (binomial tails and the line's normal tail given the factor,
    # integrated by scipy.integrate.quad); P near 4e-2, 4e-3 and 3e-5 (same-sign loadings:
    # claims rise with defaults; with zero loading 3e-2, 1e-3, 1e-6).
    xs = [100.0, 150.0, 250.0]
    r = client.post("/v1/exceedance", json=_body(book(math.sqrt(RHO), 0.5), thresholds=xs))
    assert r.status_code == 200, r.text
    for x, e in zip(xs, r.json()["estimates"], strict=True):
        ref = one_factor_sf(x, math.sqrt(RHO), 0.5)
        assert e["diagnostics"]["reliable"], e["diagnostics"]
        assert abs(e["probability"] - ref) <= 4 * e["std_error"], (x, e, ref)


def test_risk_measures_give_the_exact_var_and_euler_parts_per_group_and_line(
        client: TestClient) -> None:
    r = client.post("/v1/risk-measures", json=_body(book(0.0, 0.0), levels=[0.99, 0.999]))
    assert r.status_code == 200, r.text
    for m in r.json()["measures"]:
        q = m["level"]
        # Reference: the q-quantile of the convolution law (scipy.optimize.brentq).
        ref = optimize.brentq(lambda v, q=q: independent_sf(v) - (1 - q), 50.0, 400.0,
                              xtol=1e-8)
        half = 0.5 * (m["var_ci_high"] - m["var_ci_low"])
        assert abs(m["var"] - ref) <= 2 * half, (m, ref)  # two half-widths = 4 SE
        loans, storm = m["contributions"]
        assert (loans["label"], storm["label"]) == ("loans", "storm")
        assert math.isclose(loans["tvar_contribution"] + storm["tvar_contribution"],
                            m["tvar"], rel_tol=1e-12)
        # Reference: the line's share of E[T 1{T > v}] at the reported VaR v, exact by the
        # convolution; its part is TVaR times that share (the Euler allocation).
        a_credit, a_line = independent_tail_means(m["var"])
        want = m["tvar"] * a_line / (a_credit + a_line)
        half = 0.5 * (storm["ci_high"] - storm["ci_low"])
        assert abs(storm["tvar_contribution"] - want) <= 2 * half, (storm, want)


def test_tranches_of_a_mixed_book_match_the_convolution(client: TestClient) -> None:
    layers = [{"attachment": 80.0, "limit": 40.0}, {"attachment": 120.0, "limit": None}]
    r = client.post("/v1/layers", json=_body(book(0.0, 0.0), samples=20_000, layers=layers))
    assert r.status_code == 200, r.text
    mezzanine, senior = r.json()["layers"]
    # Reference: E[min((T - a)+, l)] = integral of P(T > t) over (a, a + l) (scipy quad over
    # the convolution law); the senior tranche's upper end is where P(T > t) < 1e-16.
    for out, top in ((mezzanine, 120.0), (senior, 400.0)):
        a = out["attachment"]
        ref = integrate.quad(independent_sf, a, top, limit=400, epsabs=1e-12)[0]
        assert abs(out["expected_loss"] - ref) <= 4 * out["expected_loss_std_error"], (out, ref)
        p = independent_sf(a)
        se = 0.5 * (out["probability_attach_ci_high"] - out["probability_attach_ci_low"]) / Z95
        assert abs(out["probability_attach"] - p) <= 4 * se, (out, p)
    assert mezzanine["probability_exhaust"] == senior["probability_attach"]


def test_runs_accept_a_mixed_book(client: TestClient) -> None:
    body = _body(book(math.sqrt(RHO), 0.5), samples=2000, thresholds=[150.0])
    batch = {"name": "mixed", "items": [{"id": "p", "kind": "exceedance", "request": body}]}
    accepted = client.post("/v1/runs", json=batch)
    assert accepted.status_code == 202, accepted.text
    run_id = accepted.json()["run_id"]
    run = wait_for_run(client, run_id, timeout=60)
    assert run["status"] == "done", run
    direct = client.post("/v1/exceedance", json=body).json()
    assert run["results"][0]["result"]["estimates"] == direct["estimates"]


# --- refusals -------------------------------------------------------------------------------


def _refusal(client: TestClient, portfolio: dict[str, Any], **fields: Any) -> dict[str, Any]:
    return one_refusal(client.post("/v1/exceedance",
                                   json=_body(portfolio, thresholds=[10.0], **fields)))


def test_refusals_name_the_claim_line_field(client: TestClient) -> None:
    line = ["body", "portfolio", "lines", 1]
    p = book(0.3, 0.5)
    p["lines"][1]["factor_loadings"] = [0.5, 0.1]
    e = _refusal(client, p)
    assert e["loc"] == [*line, "factor_loadings"] and "1 entries" in e["msg"], e
    p["lines"][1]["factor_loadings"] = [1.0]
    e = _refusal(client, p)
    assert e["loc"] == [*line, "factor_loadings"] and "b' R b" in e["msg"], e
    del p["lines"][1]["factor_loadings"]
    e = _refusal(client, p)
    assert e["loc"] == [*line, "factor_loadings"] and "required" in e["msg"], e
    p = book(0.3, 0.5)
    p["lines"][1]["severity"]["shape"] = -2.0
    assert _refusal(client, p)["loc"] == [*line, "severity", "gamma", "shape"]
    p = book(0.3, 0.5)
    p["lines"][0]["obligors"]["default_probability"] = 1.0
    assert _refusal(client, p)["loc"] == ["body", "portfolio", "lines", 0, "obligors", 0,
                                          "default_probability"]
    p = book(0.3, 0.5)
    p["dependence"] = {"copula": "gaussian", "correlation": [[1.0, 0.2], [0.2, 1.0]]}
    e = _refusal(client, p)
    assert e["loc"] == ["body", "portfolio", "dependence", "correlation"], e
    p = book(0.3, 0.5)
    p["lines"][1]["parameter_uncertainty"] = {"covariance": [[0.01, 0.0], [0.0, 0.01]]}
    assert _refusal(client, p)["loc"] == [*line, "parameter_uncertainty"]
    assert _refusal(client, book(0.3, 0.5), method="recursion")["loc"] == ["body", "method"]
    # A claim portfolio without obligors couples its lines by dependence.correlation.
    claims = {"lines": [book(0.3, 0.5)["lines"][1]]}
    e = _refusal(client, claims)
    assert e["loc"] == ["body", "portfolio", "lines", 0, "factor_loadings"], e


def test_server_limits_apply_to_both_halves_of_a_mixed_book(make_client: Any) -> None:
    client = make_client(max_obligors=999)
    e = _refusal(client, book(0.3, 0.5))
    assert e["type"] == "limit_exceeded" and "max_obligors" in e["msg"]
    client = make_client(max_expected_claims=3.0)
    e = _refusal(client, book(0.3, 0.5))
    assert e["type"] == "limit_exceeded" and "max_expected_claims" in e["msg"]


def test_risk_measures_of_a_loaded_mixed_book_report_the_std_dev(client: TestClient) -> None:
    # The figure itself is checked against a one-factor quadrature of E[(L + S)^2] in
    # tests/reference/test_credit_reference.py; here: it is served (not null) and exceeds the
    # independent parts' root sum of variances (same-sign loadings add a positive covariance).
    body = _body(book(math.sqrt(RHO), 0.5), samples=2000, levels=[0.99])
    r = client.post("/v1/risk-measures", json=body)
    assert r.status_code == 200, r.text
    sd = r.json()["std_dev"]
    ex2 = SHAPE * (SHAPE + 1) * SCALE**2
    assert sd is not None and sd > math.sqrt(N * PD * (1 - PD) * LGD**2 + LAM * ex2)
