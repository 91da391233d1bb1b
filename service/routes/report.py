"""GET /v1/runs/{run_id}/report: the run report, one self-contained HTML page."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations.

import asyncio
from typing import Annotated

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response

from service.auth import CallerDep
from service.report import build_report
from service.report.page import CSP
from service.routes.responses import ErrorBody
from service.routes.run_access import load_run
from service.worker import RunWorker


def _worker(request: Request) -> RunWorker:
    worker: RunWorker = request.app.state.runs
    return worker


WorkerDep = Annotated[RunWorker, Depends(_worker)]


def build_router() -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["runs"])

    @router.get(
        # response_class Response, not HTMLResponse: FastAPI gives every documented response
        # the route class's media type, and the errors (401, 404, 422, 500) are JSON.
        "/runs/{run_id}/report", response_class=Response, summary="Run report (HTML)",
        responses={
            200: {"description": "One self-contained HTML page (no external assets): the "
                  "run, each item's model in words, tables, charts, method, warnings and "
                  "the cautions.", "content": {"text/html": {"schema": {"type": "string"}}}},
            404: {"model": ErrorBody, "description": "No run with this run_id."},
        },
    )
    async def get_report(run_id: str, worker: WorkerDep, caller: CallerDep) -> HTMLResponse:
        """The report of the run as it stands: finished items in full, the others noted.
        Open it in a browser, save it, or mail it: it needs no network."""
        run, batch = await load_run(worker, run_id, owner=caller.owner)
        page = await asyncio.to_thread(build_report, run, batch)
        return HTMLResponse(page, headers={"Content-Security-Policy": CSP})

    return router
