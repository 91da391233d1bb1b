"""The run report, the runs page and the API docs in a real browser with no network.

A real server (``sys.executable -m uvicorn`` on loopback, process pool) computes the month-end
example batch; headless Chromium, driven over the DevTools protocol on a pipe, loads each
page, the test checks the DOM, that no console error or failed load occurred and that nothing
was requested from anywhere but the server, and saves a screenshot under the test's tmp dir.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from headless_browser import Browser, PageVisit, chromium_path

from service import charts
from service.resources import KINDS
from service.settings import DEFAULT_EXAMPLES_DIR

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"

pytestmark = pytest.mark.skipif(
    chromium_path() is None,
    reason="chromium is not installed (Debian package 'chromium'; .ci/run installs it)")


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    tmp = tmp_path_factory.mktemp("browser-server")
    port = _free_port()
    env = {**os.environ, "TAILGAUGE_DATA_DIR": str(tmp / "data"), "TAILGAUGE_WORKERS": "2",
           "TAILGAUGE_EXECUTOR": "process"}
    log = (tmp / "server.log").open("wb")
    process = subprocess.Popen(
        [sys.executable, "-m", "uvicorn", "service.app:app", "--host", "127.0.0.1", "--port",
         str(port)], cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            assert process.poll() is None, (tmp / "server.log").read_text()
            try:
                if httpx.get(f"{base}/v1/health", timeout=1).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert time.monotonic() < deadline, "the server did not come up in 60 s"
            time.sleep(0.2)
        yield base
    finally:
        process.terminate()
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
        log.close()


@pytest.fixture(scope="module")
def month_end_run(server: str) -> dict[str, Any]:
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    run_id = httpx.post(f"{server}/v1/runs", json=batch, timeout=30).json()["run_id"]
    deadline = time.monotonic() + 180
    while True:
        run: dict[str, Any] = httpx.get(f"{server}/v1/runs/{run_id}", timeout=30).json()
        if run["status"] not in ("queued", "running"):
            return run
        assert time.monotonic() < deadline, "the month-end run did not finish in 180 s"
        time.sleep(0.3)


@pytest.fixture
def browser(tmp_path: Path) -> Iterator[Browser]:
    profile = tmp_path / "chromium-profile"  # a fresh user-data-dir for every test
    profile.mkdir()
    with Browser(profile) as b:
        yield b


def _only_from(visit: PageVisit, base: str) -> None:
    outside = [u for u in visit.requests if not u.startswith((base, "data:", "blob:"))]
    assert not outside, f"the page asked for outside resources: {outside}"


def _wait_for(browser: Browser, expression: str, timeout: float = 20.0) -> Any:
    deadline = time.monotonic() + timeout
    while True:
        value = browser.evaluate(expression)
        if value:
            return value
        assert time.monotonic() < deadline, f"never true in the page: {expression}"
        time.sleep(0.2)


def test_month_end_report_shows_every_item_and_chart_without_errors(
        server: str, month_end_run: dict[str, Any], browser: Browser, tmp_path: Path) -> None:
    assert month_end_run["status"] == "done"
    visit = browser.visit(f"{server}/v1/runs/{month_end_run['run_id']}/report")
    assert visit.errors == []
    _only_from(visit, server)
    found = browser.evaluate("""Array.from(document.querySelectorAll('section.item')).map(s => ({
        id: s.dataset.itemId,
        charts: Array.from(s.querySelectorAll('figure.chart')).map(f => f.dataset.kind),
        drawn: Array.from(s.querySelectorAll('figure.chart svg')).filter(
            g => g.getBoundingClientRect().width > 300 && g.getBoundingClientRect().height > 100
        ).length,
        tables: s.querySelectorAll('table').length}))""")
    expected = [{"id": r["id"], "charts": charts.kinds_for(
        KINDS[r["kind"]].response.model_validate(r["result"]))} for r in month_end_run["results"]]
    assert [{"id": f["id"], "charts": f["charts"]} for f in found] == expected
    for item in found:
        assert item["drawn"] == len(item["charts"]) and item["tables"] >= 1, item
    cautions = browser.evaluate("document.querySelector('.cautions').innerText")
    assert "not advice" in cautions
    shot = browser.screenshot(tmp_path / "report_month_end.png")
    print(f"\nmonth-end report screenshot: {shot}")
    assert shot.stat().st_size > 50_000


def test_runs_page_lists_the_run_with_its_progress_and_report_link(
        server: str, month_end_run: dict[str, Any], browser: Browser, tmp_path: Path) -> None:
    visit = browser.visit(f"{server}/", settle_s=1.0)
    run_id = month_end_run["run_id"]
    row = _wait_for(browser, f"""(() => {{
        const row = document.querySelector('tr[data-run-id="{run_id}"]');
        return row && {{status: row.dataset.status, bar: row.querySelector('progress').value,
                        max: row.querySelector('progress').max,
                        report: row.querySelector('a').getAttribute('href')}};
    }})()""")
    assert row == {"status": "done", "bar": 5, "max": 5,
                   "report": f"/v1/runs/{run_id}/report"}
    options = _wait_for(browser, "Array.from(document.querySelectorAll('#example option'))"
                                 ".map(o => o.value).filter(v => v)")
    assert "month_end" in options
    assert browser.evaluate("location.pathname") == "/ui"
    assert visit.errors == []
    _only_from(visit, server)
    browser.screenshot(tmp_path / "runs_page.png")


def test_runs_page_submits_an_example_and_shows_the_new_run(
        server: str, month_end_run: dict[str, Any], browser: Browser) -> None:
    visit = browser.visit(f"{server}/ui", settle_s=1.0)
    _wait_for(browser, "document.querySelectorAll('#example option[value=month_end]').length")
    before = browser.evaluate("document.querySelectorAll('tr[data-run-id]').length")
    browser.evaluate("document.querySelector('#from-example button').click()")
    message = _wait_for(browser, "document.getElementById('message').innerText")
    assert message.startswith("submitted: run "), message
    _wait_for(browser, f"document.querySelectorAll('tr[data-run-id]').length > {before}")
    assert visit.errors == [] and month_end_run["status"] == "done"


def test_api_docs_render_offline(server: str, browser: Browser, tmp_path: Path) -> None:
    visit = browser.visit(f"{server}/docs", settle_s=1.0)
    count = _wait_for(browser, "document.querySelectorAll('.opblock').length")
    assert count >= 10
    title = browser.evaluate("document.querySelector('.info .title').innerText")
    assert title.startswith("tailgauge")
    assert visit.errors == []
    _only_from(visit, server)
    browser.screenshot(tmp_path / "docs.png", full_page=False)
    visit = browser.visit(f"{server}/redoc", settle_s=1.0)
    _wait_for(browser, "document.body.innerText.includes('Submit a batch run')")
    assert visit.errors == []
    _only_from(visit, server)
