"""Charts drawn from real responses of the endpoints: the SVG parses, holds the expected
series, its axis ranges contain the data, and every marker sits inside the plotting frame."""

from __future__ import annotations

import itertools
import json
from typing import Any

import pytest
from fastapi.testclient import TestClient
from svg_reading import frame, inside, markers, parse, series

from service import charts
from service.charts import style
from service.schemas.exceedance import ExceedanceResponse
from service.schemas.layers import LayersResponse
from service.schemas.risk_measures import RiskMeasuresResponse
from service.schemas.ruin import RuinResponse
from service.settings import DEFAULT_EXAMPLES_DIR

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _post(client: TestClient, path: str, body: dict[str, Any]) -> dict[str, Any]:
    reply = client.post(path, json=body)
    assert reply.status_code == 200, reply.text
    result: dict[str, Any] = reply.json()
    return result


@pytest.fixture(scope="module")
def exceedance_mc(client: TestClient) -> ExceedanceResponse:
    body = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 2.0},
                                     "severity": {"family": "lognormal", "mu": 0.0,
                                                  "sigma": 1.0}}]},
            "thresholds": [2.0, 5.0, 10.0, 20.0], "precision": {"samples": 4000}, "seed": 7}
    return ExceedanceResponse.model_validate(_post(client, "/v1/exceedance", body))


def _unreliable(flags: list[bool]) -> set[str]:
    return {"series-unreliable"} if not all(flags) else set()


def test_exceedance_chart_has_estimate_and_band_within_its_axes(
        exceedance_mc: ExceedanceResponse) -> None:
    root = parse(charts.render("exceedance", exceedance_mc, "svg"))
    flags = [e.diagnostics.reliable for e in exceedance_mc.estimates]
    assert set(series(root)) == {"series-estimate", "series-band"} | _unreliable(flags)
    f = frame(root, "exceedance")
    assert (f.x_scale, f.y_scale) == ("log", "log")
    for e in exceedance_mc.estimates:
        assert f.holds_x(e.threshold)
        for value in (e.probability, e.ci_low, e.ci_high):
            assert value is not None and f.holds_y(value)
    points = markers(series(root)["series-estimate"])
    assert len(points) == len(exceedance_mc.estimates)
    assert all(inside(p, f.box) for p in points)


def test_exceedance_chart_marks_the_common_return_periods_in_range(
        exceedance_mc: ExceedanceResponse) -> None:
    root = parse(charts.render("exceedance", exceedance_mc))
    f = frame(root, "exceedance")
    guides = {el.get("id") for el in root.iter() if el.get("id", "").startswith("guide-rp-")}
    # 1 in 10, 50, 100, 200, 250 and 1000 years: common practice.
    expected = {f"guide-rp-{t:g}" for t in (10, 50, 100, 200, 250, 1000) if f.holds_y(1 / t)}
    assert guides == expected and "guide-rp-200" in guides
    texts = {"".join(t.itertext()) for t in root.iter("{http://www.w3.org/2000/svg}text")}
    assert "1 in 200" in texts
    assert "exceedance probability P(S > x)" in texts
    assert "loss x per period (money units)" in texts


def test_exceedance_chart_of_recursion_draws_the_two_bounds(client: TestClient) -> None:
    body = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 3.0},
                                     "severity": {"family": "gamma", "shape": 2.0,
                                                  "scale": 1.0}}]},
            "thresholds": [10.0, 15.0, 20.0], "method": "recursion"}
    response = ExceedanceResponse.model_validate(_post(client, "/v1/exceedance", body))
    root = parse(charts.render("exceedance", response))
    assert set(series(root)) == {"series-estimate", "series-lower-bound", "series-upper-bound"}
    f = frame(root, "exceedance")
    for e in response.estimates:
        for value in (e.ci_low, e.probability, e.ci_high):
            assert value is not None and value > 0 and f.holds_y(value)
    for name in ("series-lower-bound", "series-upper-bound"):
        assert len(markers(series(root)[name])) == 3


def test_exceedance_chart_shows_an_unreached_threshold_as_its_upper_bound(
        client: TestClient) -> None:
    body = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 1.0},
                                     "severity": {"family": "exponential", "mean": 1.0}}]},
            "thresholds": [1.0, 200.0], "method": "crude", "precision": {"samples": 1000},
            "seed": 3}
    response = ExceedanceResponse.model_validate(_post(client, "/v1/exceedance", body))
    assert response.estimates[1].probability == 0.0  # e^-200 is never sampled
    root = parse(charts.render("exceedance", response))
    assert "series-no-hits" in series(root)
    f = frame(root, "exceedance")
    bound = response.estimates[1].ci_high
    assert bound is not None and f.holds_y(bound) and f.holds_x(200.0)
    assert all(inside(p, f.box) for p in markers(series(root)["series-no-hits"]))


@pytest.fixture(scope="module")
def measures(client: TestClient) -> RiskMeasuresResponse:
    body = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 5.0},
                                     "severity": {"family": "gamma", "shape": 2.0,
                                                  "scale": 10.0}}]},
            "levels": [0.9, 0.99, 0.995], "return_periods": [50.0],
            "precision": {"samples": 20000}, "seed": 11}
    return RiskMeasuresResponse.model_validate(_post(client, "/v1/risk-measures", body))


def test_var_tvar_chart_has_both_series_and_their_intervals_in_range(
        measures: RiskMeasuresResponse) -> None:
    root = parse(charts.render("var_tvar", measures))
    flags = [m.diagnostics.reliable for m in measures.measures]
    assert set(series(root)) == {"series-var", "series-tvar"} | _unreliable(flags)
    f = frame(root, "measures")
    for m in measures.measures:
        for value in (m.var, m.var_ci_low, m.var_ci_high, m.tvar, m.tvar_ci_low,
                      m.tvar_ci_high):
            assert value is not None and f.holds_y(value)
    for name in ("series-var", "series-tvar"):
        points = markers(series(root)[name])
        assert len(points) == len(measures.measures)
        assert all(inside(p, f.box) for p in points)


def test_exceedance_chart_of_risk_measures_places_var_at_one_minus_level(
        measures: RiskMeasuresResponse) -> None:
    root = parse(charts.render("exceedance", measures))
    assert "series-quantiles" in series(root)
    f = frame(root, "exceedance")
    for m in measures.measures:
        assert m.var is not None and f.holds_x(m.var) and f.holds_y(1 - m.level)
    # 3 levels and 1 return period: one marker each.
    assert len(markers(series(root)["series-quantiles"])) == 4


def test_layers_chart_has_a_bar_per_layer_and_both_probabilities(client: TestClient) -> None:
    body = {"portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 5.0},
                                     "severity": {"family": "gamma", "shape": 2.0,
                                                  "scale": 10.0}}]},
            "layers": [{"attachment": 80.0, "limit": 40.0}, {"attachment": 120.0,
                                                              "limit": 60.0},
                       {"attachment": 200.0}],
            "precision": {"samples": 20000}, "seed": 5}
    response = LayersResponse.model_validate(_post(client, "/v1/layers", body))
    root = parse(charts.render("layers", response))
    assert set(series(root)) == {"series-expected-loss", "series-attach", "series-exhaust"}
    bars = {el.get("id") for el in root.iter() if el.get("id", "").startswith("bar-expected")}
    assert bars == {f"bar-expected-loss-{i}" for i in range(3)}
    loss, prob = frame(root, "layers-loss"), frame(root, "layers-probability")
    assert prob.x_scale == "log"
    for ly in response.layers:
        for value in (ly.expected_loss, ly.expected_loss_ci_low, ly.expected_loss_ci_high):
            assert value is not None and loss.holds_x(value)
        assert ly.probability_attach is not None and prob.holds_x(ly.probability_attach)
    # The unlimited layer has no exhaustion probability: two markers, not three.
    assert len(markers(series(root)["series-exhaust"])) == 2
    assert charts.render("layers", response, "png").startswith(PNG_SIGNATURE)


def test_ruin_chart_draws_psi_band_approximation_and_the_target(client: TestClient) -> None:
    body = {"process": {"claim_rate": 1.0, "severity": {"family": "exponential", "mean": 1.0},
                        "loading": 0.25},
            "capital": [0.0, 5.0, 10.0, 20.0], "target_probability": 0.01,
            "precision": {"samples": 4000}, "seed": 2}
    response = RuinResponse.model_validate(_post(client, "/v1/ruin", body))
    root = parse(charts.render("ruin", response))
    flags = [e.diagnostics.reliable for e in response.estimates]
    assert set(series(root)) == {"series-estimate", "series-band",
                                 "series-approximation"} | _unreliable(flags)
    ids = {el.get("id") for el in root.iter()}
    assert {"guide-target", "guide-capital"} <= ids
    f = frame(root, "ruin")
    assert f.y_scale == "log"
    for e in response.estimates:
        assert f.holds_x(e.capital)
        assert e.probability is not None and f.holds_y(e.probability)
    assert all(inside(p, f.box) for p in markers(series(root)["series-estimate"]))
    assert charts.render("ruin", response, "png").startswith(PNG_SIGNATURE)


def test_contributions_chart_draws_one_series_per_level_and_a_bar_per_group(
        client: TestClient, measures: RiskMeasuresResponse) -> None:
    body = json.loads((DEFAULT_EXAMPLES_DIR / "risk_measures_bond_and_loan_book.json")
                      .read_text(encoding="utf-8"))
    body["precision"] = {"samples": 2000}
    response = RiskMeasuresResponse.model_validate(_post(client, "/v1/risk-measures", body))
    assert "contributions" in charts.kinds_for(response)
    assert "contributions" not in charts.kinds_for(measures)  # claim lines: none
    root = parse(charts.render("contributions", response))
    n = len(response.measures)
    assert set(series(root)) == {f"series-contribution-{k}" for k in range(n)}
    groups = {c.label for m in response.measures for c in m.contributions}
    bars = [el for el in root.iter() if el.get("id", "").startswith("bar-contribution-")]
    assert len(bars) == sum(
        c.tvar_contribution is not None for m in response.measures for c in m.contributions)
    assert len(groups) == 5  # the example's obligor groups
    f = frame(root, "contributions")
    for m in response.measures:
        for c in m.contributions:
            for value in (c.ci_low, c.tvar_contribution, c.ci_high):
                assert value is not None and f.holds_x(value)
    assert charts.render("contributions", response, "png").startswith(PNG_SIGNATURE)


def test_reliability_strip_has_a_row_per_figure_and_marks_unreliable_ones(
        measures: RiskMeasuresResponse, exceedance_mc: ExceedanceResponse) -> None:
    shaky = exceedance_mc.model_copy(deep=True)
    shaky.estimates[-1].diagnostics.reliable = False
    shaky.estimates[-1].diagnostics.reason = "one sample carries 40% of the total"
    root = parse(charts.render("reliability", shaky))
    found = series(root)
    assert set(found) == {"series-reliable", "series-unreliable"}
    assert len(markers(found["series-unreliable"])) == 1
    assert len(markers(found["series-reliable"])) == len(shaky.estimates) - 1
    texts = ["".join(t.itertext()) for t in root.iter("{http://www.w3.org/2000/svg}text")]
    assert texts.count("unreliable") == 1
    f = frame(root, "reliability")
    for e in shaky.estimates:
        assert e.relative_error is not None and f.holds_x(e.relative_error)
    # Risk measures: VaR, TVaR per level and the return-period loss, one row each.
    rows = [el for el in parse(charts.render("reliability", measures)).iter()
            if el.get("id", "").startswith("bar-")]
    assert len(rows) == 2 * len(measures.measures) + len(measures.curve)


@pytest.mark.parametrize("kind", ["exceedance", "var_tvar", "reliability"])
def test_charts_draw_png_too(kind: str, measures: RiskMeasuresResponse) -> None:
    # layers, ruin and contributions check their PNG in their own tests above.
    png = charts.render(kind, measures, "png")
    assert png.startswith(PNG_SIGNATURE) and len(png) > 5000


def test_same_response_gives_the_same_svg_bytes(exceedance_mc: ExceedanceResponse) -> None:
    assert charts.render("exceedance", exceedance_mc) == charts.render(
        "exceedance", exceedance_mc)


def _luminance(colour: str) -> float:
    # WCAG relative luminance of an sRGB colour (what a greyscale print keeps).
    def channel(c: int) -> float:
        v = c / 255
        return v / 12.92 if v <= 0.03928 else ((v + 0.055) / 1.055) ** 2.4

    r, g, b = (int(colour[i:i + 2], 16) for i in (1, 3, 5))
    return 0.2126 * channel(r) + 0.7152 * channel(g) + 0.0722 * channel(b)


@pytest.mark.parametrize("group", [
    (style.INK, style.SLATE, style.COPPER),  # series drawn together as lines and markers
    (style.MIST, style.SAND, "#ffffff"),  # fills drawn together
])
def test_colours_drawn_together_differ_in_greyscale(group: tuple[str, ...]) -> None:
    values = sorted(_luminance(c) for c in group)
    gaps = [b - a for a, b in itertools.pairwise(values)]
    assert min(gaps) > 0.05, (group, values)



def test_the_service_starts_without_matplotlib_and_draws_with_it_on_demand():
    # matplotlib is 0.7 s of a server's start; only a chart request needs it (render and
    # kinds_for import the catalogue, tested above through every chart endpoint).
    import subprocess
    import sys

    from server_processes import ROOT, environment

    code = ("import sys, service.app; assert 'matplotlib' not in sys.modules, 'at start'; "
            "import service.charts.catalogue; "
            "assert 'matplotlib' in sys.modules")
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=environment(),
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0, done.stderr
