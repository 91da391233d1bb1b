"""GET /v1/runs/{run_id}/report and tailgauge run --report: one self-contained HTML page with
every item's model, tables, charts, method, warnings and the cautions."""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient
from report_reading import ReportDom, read

from service import charts
from service.charts.readings import readings
from service.cli import main
from service.report import build_report
from service.resources import KINDS
from service.schemas.runs import RunBatchIn, RunItemDone, RunOut
from service.settings import DEFAULT_EXAMPLES_DIR

EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"


def _finished(client: TestClient, batch: dict[str, Any]) -> str:
    run_id = str(client.post("/v1/runs", json=batch).json()["run_id"])
    deadline = time.monotonic() + 120
    while client.get(f"/v1/runs/{run_id}").json()["status"] in ("queued", "running"):
        assert time.monotonic() < deadline, "the example run did not finish in 120 s"
        time.sleep(0.2)
    return run_id


@pytest.fixture(scope="module")
def month_end(client: TestClient) -> tuple[RunOut, RunBatchIn, str]:
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    run_id = _finished(client, batch)
    reply = client.get(f"/v1/runs/{run_id}/report")
    assert reply.status_code == 200
    assert reply.headers["content-type"].startswith("text/html")
    assert "default-src 'none'" in reply.headers["content-security-policy"]
    run = RunOut.model_validate(client.get(f"/v1/runs/{run_id}").json())
    stored = RunBatchIn.model_validate(client.get(f"/v1/runs/{run_id}/batch").json())
    return run, stored, reply.text


def _expected_kinds(result: RunItemDone) -> list[str]:
    return charts.kinds_for(KINDS[result.kind].response.model_validate(result.result))


def test_report_has_a_section_with_charts_for_every_item(
        month_end: tuple[RunOut, RunBatchIn, str]) -> None:
    run, batch, html = month_end
    dom = read(html)
    sections = dom.find("section", "item")
    assert [s.attrs["data-item-id"] for s in sections] == [i.id for i in batch.items]
    for result in run.results:
        assert isinstance(result, RunItemDone)
        figures = [e.attrs["data-kind"] for e in dom.find("figure", "chart")
                   if e.item == result.id]
        assert figures == _expected_kinds(result)
        svgs = [e for e in dom.find("svg") if e.item == result.id]
        assert len(svgs) == len(figures)
        assert any(e.item == result.id for e in dom.find("table"))


def test_report_names_the_run_its_engine_its_seeds_and_the_cautions(
        month_end: tuple[RunOut, RunBatchIn, str]) -> None:
    run, _, html = month_end
    text = read(html).all_text
    assert run.name in text and run.run_id in text and run.engine_version in text
    for result in run.results:
        assert str(result.seed) in text  # in full, never as 5.762e+15
    assert "not advice" in text
    assert "qualified actuary's sign-off" in text
    assert "Model risk" in text


def test_report_loads_nothing_from_outside(month_end: tuple[RunOut, RunBatchIn, str]) -> None:
    _, _, html = month_end
    dom = read(html)
    assert not dom.find("script") and not dom.find("img") and not dom.find("iframe")
    for element in dom.elements:
        for name in ("src", "href", "xlink:href"):
            value = element.attrs.get(name)
            if value is not None:
                assert value.startswith(("#", "data:")), (element.tag, name, value)
    csp = [e for e in dom.find("meta") if e.attrs.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0].attrs["content"]
    ids = [e.attrs["id"] for e in dom.elements if "id" in e.attrs]
    assert len(ids) == len(set(ids)), "two charts share an element id"


def test_report_highlights_every_figure_the_diagnostics_flag(
        month_end: tuple[RunOut, RunBatchIn, str]) -> None:
    run, batch, _ = month_end
    # Flag one more figure than the engine did: the report must show exactly the flagged ones.
    shaky = run.model_copy(deep=True)
    first = shaky.results[0]
    assert isinstance(first, RunItemDone)
    first.result["estimates"][0]["diagnostics"].update(reliable=False,
                                                       reason="test: one sample dominates")
    dom = read(build_report(shaky, batch))
    for result in shaky.results:
        assert isinstance(result, RunItemDone)
        response = KINDS[result.kind].response.model_validate(result.result)
        flagged = sum(not r.reliable for r in readings(response) if not r.label.startswith(
            "TVaR"))  # VaR and TVaR share one table row
        rows = [e for e in dom.find("tr", "unreliable") if e.item == result.id]
        assert len(rows) == flagged, result.id
    assert "test: one sample dominates" in dom.all_text
    warnings = [e for e in dom.find("ul", "warnings") if e.item == first.id]
    assert warnings, "an unreliable figure is also listed among the warnings"


def test_report_of_an_unknown_run_is_404(client: TestClient) -> None:
    reply = client.get("/v1/runs/no-such-run/report")
    assert reply.status_code == 404
    assert reply.json()["detail"][0]["loc"] == ["path", "run_id"]


def test_report_of_a_failed_item_shows_its_error(client: TestClient) -> None:
    batch = {"name": "one bad item", "items": [
        {"id": "bad", "kind": "exceedance", "request": {
            "portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 1.0},
                                     "severity": {"family": "lognormal", "mu": 0.0,
                                                  "sigma": -1.0}}]},
            "thresholds": [1.0]}}]}
    run_id = _finished(client, batch)
    dom: ReportDom = read(client.get(f"/v1/runs/{run_id}/report").text)
    section = dom.find("section", "item")[0]
    assert section.attrs["data-status"] == "failed"
    assert "sigma" in dom.all_text and not dom.find("figure", "chart")


def test_cli_writes_the_report_beside_the_results(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TAILGAUGE_EXECUTOR", "thread")
    monkeypatch.setenv("TAILGAUGE_WORKERS", "2")
    out, page = tmp_path / "results.json", tmp_path / "out" / "report.html"
    assert main(["run", str(EXAMPLE), "--out", str(out), "--report", str(page)]) == 0
    run = RunOut.model_validate_json(out.read_text(encoding="utf-8"))
    dom = read(page.read_text(encoding="utf-8"))
    assert [s.attrs["data-item-id"] for s in dom.find("section", "item")] == [
        r.id for r in run.results]
    assert len(dom.find("figure", "chart")) == sum(
        len(_expected_kinds(r)) for r in run.results if isinstance(r, RunItemDone))
