"""The client against a real server: every endpoint, typed errors, tables."""

from __future__ import annotations

import asyncio
import inspect
import math
from pathlib import Path
from typing import Any

import httpx
import pytest
from client_harness import Served, start_server, stop_server
from scipy import stats

from client import (
    AsyncClient,
    Client,
    ExceedanceResult,
    NotAuthorized,
    NotFound,
    RequestRejected,
    RiskMeasuresResult,
)

LOGNORMAL = {"family": "lognormal", "mu": 0.0, "sigma": 1.0}
ONE_CLAIM = {"lines": [{"label": "single claim", "count": {"kind": "fixed", "n": 1},
                        "severity": LOGNORMAL}]}
BOOK = {"lines": [{"label": "property", "count": {"kind": "poisson", "mean": 3.0},
                   "severity": {"family": "lognormal", "mu": 1.0, "sigma": 1.2}}]}


def test_exceedance_matches_the_raw_http_answer_and_scipy(server: Served) -> None:
    body = {"portfolio": ONE_CLAIM, "thresholds": [3.0, 10.0], "method": "crude",
            "precision": {"samples": 20000}, "seed": 11}
    with Client(server.base_url) as tg:
        result = tg.exceedance(portfolio=ONE_CLAIM, thresholds=[3.0, 10.0], method="crude",
                               precision={"samples": 20000}, seed=11)
    raw = httpx.post(f"{server.base_url}/v1/exceedance", json=body, timeout=60).json()
    assert isinstance(result, ExceedanceResult)
    # The client adds nothing and drops nothing: same seed, same body, same figures.
    assert result.model_dump(mode="json", exclude={"elapsed_s"}) == {
        k: v for k, v in raw.items() if k != "elapsed_s"}
    for estimate, x in zip(result.estimates, [3.0, 10.0], strict=True):
        truth = stats.lognorm(s=1.0).sf(x)  # reference: scipy.stats.lognorm
        assert estimate.probability is not None and estimate.std_error is not None
        assert abs(estimate.probability - truth) <= 4 * estimate.std_error


def test_risk_measures_layers_and_ruin_return_typed_results(server: Served) -> None:
    with Client(server.base_url) as tg:
        measures = tg.risk_measures(portfolio=BOOK, levels=[0.99, 0.995],
                                    return_periods=[200.0], precision={"samples": 4000}, seed=3)
        layered = tg.layers(portfolio=BOOK, layers=[{"attachment": 20.0, "limit": 30.0}],
                            precision={"samples": 4000}, seed=3)
        ruined = tg.ruin(process={"claim_rate": 1.0, "severity": {"family": "exponential",
                                                                    "mean": 1.0},
                                  "loading": 0.25},
                         capital=[5.0], precision={"samples": 4000}, seed=3)
    assert isinstance(measures, RiskMeasuresResult)
    assert [m.level for m in measures.measures] == [0.99, 0.995]
    assert measures.curve[0].return_period == 200.0
    layer = layered.layers[0]
    assert layer.expected_loss is not None and 0.0 <= layer.expected_loss <= 30.0
    # Exponential claims: psi(u) = exp(-theta u / (mu (1 + theta))) / (1 + theta), the
    # classical closed form (e.g. Asmussen and Albrecher, Ruin Probabilities, ch. IV).
    truth = math.exp(-0.25 * 5.0 / 1.25) / 1.25
    estimate = ruined.estimates[0]
    assert estimate.probability is not None
    assert estimate.ci_low is not None and estimate.ci_high is not None
    assert estimate.ci_low <= truth <= estimate.ci_high or (
        estimate.std_error is not None and abs(estimate.probability - truth)
        <= 4 * estimate.std_error)


def test_server_422_is_raised_with_loc_msg_and_type(server: Served) -> None:
    # Schema-valid, refused by the engine: TVaR does not exist for an infinite-mean line.
    heavy = {"lines": [{"count": {"kind": "poisson", "mean": 1.0},
                        "severity": {"family": "pareto", "alpha": 0.8, "scale": 1.0}}]}
    with Client(server.base_url) as tg, pytest.raises(RequestRejected) as caught:
        tg.risk_measures(portfolio=heavy, levels=[0.99], precision={"samples": 1000}, seed=1)
    assert caught.value.status == 422
    first = caught.value.errors[0]
    assert first.loc[:3] == ("body", "portfolio", "lines")
    assert first.type and first.msg


def test_invalid_fields_fail_before_sending_with_the_server_s_shape() -> None:
    sent: list[httpx.Request] = []

    def answer(request: httpx.Request) -> httpx.Response:
        sent.append(request)
        return httpx.Response(500)

    transport = httpx.MockTransport(answer)
    with Client("http://test", transport=transport) as tg, pytest.raises(RequestRejected) as caught:
        tg.exceedance(portfolio=ONE_CLAIM, thresholds=[float("nan")])
    assert sent == []
    assert caught.value.errors[0].loc == ("body", "thresholds", 0)


def test_bearer_token_is_sent_on_every_call() -> None:
    seen: list[str | None] = []

    def answer(request: httpx.Request) -> httpx.Response:
        seen.append(request.headers.get("Authorization"))
        return httpx.Response(200, json={"status": "ok"})

    with Client("http://test", token="s3cret", transport=httpx.MockTransport(answer)) as tg:
        tg.health()
    assert seen == ["Bearer s3cret"]


def test_rows_and_frames_carry_every_estimate(server: Served) -> None:
    pandas = pytest.importorskip("pandas", reason="the frames extra is not installed")
    with Client(server.base_url) as tg:
        result = tg.exceedance(portfolio=BOOK, thresholds=[10.0, 50.0, 100.0],
                               precision={"samples": 2000}, seed=5)
    rows = result.to_rows()
    assert [row["threshold"] for row in rows] == [10.0, 50.0, 100.0]
    assert rows[0]["seed"] == 5 and "diagnostics_reliable" in rows[0]
    frame = result.to_frame()
    assert isinstance(frame, pandas.DataFrame)
    assert list(frame["probability"]) == [e.probability for e in result.estimates]


def test_async_client_gives_the_sync_figures(server: Served) -> None:
    fields: dict[str, Any] = {"portfolio": BOOK, "thresholds": [30.0],
                              "precision": {"samples": 2000}, "seed": 9}

    async def go() -> ExceedanceResult:
        async with AsyncClient(server.base_url) as tg:
            return await tg.exceedance(**fields)

    with Client(server.base_url) as tg:
        expected = tg.exceedance(**fields)
    got = asyncio.run(go())
    assert got.estimates == expected.estimates


def _public(cls: type) -> dict[str, list[str]]:
    return {name: list(inspect.signature(member).parameters)
            for name, member in vars(cls).items()
            if callable(member) and not name.startswith("_")}


def test_sync_and_async_clients_offer_the_same_methods() -> None:
    sync, not_sync = _public(Client), _public(AsyncClient)
    sync["aclose"] = sync.pop("close")
    assert sync == not_sync


def test_fit_recovers_scipy_s_lognormal_mle(server: Served) -> None:
    sample = stats.lognorm(s=1.5, scale=math.exp(1.0)).rvs(size=400, random_state=7)
    with Client(server.base_url) as tg:
        fitted = tg.fit(claims=[float(x) for x in sample], families=["lognormal"], seed=3,
                        bootstrap={"replicates": 9})
    row = fitted.to_rows()[0]
    # Reference: scipy.stats.lognorm.fit with the location fixed at 0 (the MLE in closed form).
    shape, _, scale = stats.lognorm.fit(sample, floc=0)
    assert row["family"] == "lognormal"
    assert row["param_sigma"] == pytest.approx(shape, rel=1e-4)
    assert row["param_mu"] == pytest.approx(math.log(scale), rel=1e-4)


def test_runs_are_private_to_their_token(tmp_path: Path) -> None:
    served = start_server(tmp_path / "data", tmp_path / "server.log",
                          TAILGAUGE_TOKENS="alpha-token,beta-token")
    try:
        batch = {"name": "private", "items": [{"id": "one", "kind": "exceedance", "request": {
            "portfolio": BOOK, "thresholds": [30.0], "precision": {"samples": 1000}}}]}
        with Client(served.base_url, token="alpha-token") as alpha:
            run_id = alpha.submit_run(batch).run_id
            assert alpha.get_run(run_id).run_id == run_id
        with Client(served.base_url, token="beta-token") as beta, pytest.raises(NotFound):
            beta.get_run(run_id)  # another token's run is not even acknowledged
        with Client(served.base_url) as anonymous, pytest.raises(NotAuthorized):
            anonymous.get_run(run_id)
    finally:
        stop_server(served)
