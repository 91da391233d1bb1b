"""Charts as SVG (default) or PNG: of a run's item, and of a synchronous request.

- ``GET /v1/runs/{run_id}/items/{item_id}/chart?kind=&format=``: the chart of a computed item.
- ``POST /v1/exceedance/chart`` (and ``/v1/risk-measures/chart``, ``/v1/layers/chart``,
  ``/v1/ruin/chart``): the same body as the JSON endpoint, computed exactly as it computes
  it, answered as a picture. The JSON endpoints are unchanged.

Without ``kind`` the first chart that applies is drawn (exceedance, var_tvar, layers, ruin,
contributions, reliability, in that order). A kind with nothing to show for the result is a
422 at ``query.kind`` that lists the kinds that apply.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

import asyncio
from typing import Annotated, Any

from fastapi import APIRouter, Body, Depends, Query, Request, Response
from fastapi.exceptions import RequestValidationError
from pydantic import BaseModel

from service import charts, pipeline
from service.auth import CallerDep
from service.charts import ChartKind, ImageFormat
from service.deps import ContextDep
from service.errors import detail_entry
from service.resources import KINDS
from service.routes.responses import ERROR_RESPONSES, ErrorBody
from service.routes.run_access import done_item, load_run
from service.worker import RunWorker

PATHS = {"exceedance": "exceedance", "risk_measures": "risk-measures", "layers": "layers",
         "ruin": "ruin"}

IMAGE_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {
        "description": "The chart: SVG (default) or PNG, as asked by format.",
        "content": {"image/svg+xml": {"schema": {"type": "string"}},
                    "image/png": {"schema": {"type": "string", "format": "binary"}}},
    },
}
KIND_HELP = (
    "Which chart: exceedance (P(S > x) on log axes), var_tvar (VaR and TVaR by level), layers, "
    "ruin (psi(u) by capital), contributions (Euler contributions of obligor groups to TVaR, "
    "when the result has them), reliability (relative error and reliable flag of every "
    "figure). Absent: the first that applies."
)


def _kind_query() -> Any:
    return Query(alias="kind", description=KIND_HELP)


def _format_query() -> Any:
    return Query(alias="format", description="svg (default) or png.")


# The charts that can ever apply to a result of each kind: a request for another kind is
# refused before anything is computed.
POSSIBLE: dict[str, frozenset[str]] = {
    "exceedance": frozenset({"exceedance", "reliability"}),
    "risk_measures": frozenset({"exceedance", "var_tvar", "contributions", "reliability"}),
    "layers": frozenset({"exceedance", "layers", "reliability"}),
    "ruin": frozenset({"ruin", "reliability"}),
}


def _worker(request: Request) -> RunWorker:
    worker: RunWorker = request.app.state.runs
    return worker


WorkerDep = Annotated[RunWorker, Depends(_worker)]


async def picture(response: BaseModel, kind: str | None, fmt: ImageFormat) -> Response:
    """Draw off the event loop; a kind that shows nothing here is a 422 at query.kind."""
    available = charts.kinds_for(response)
    chosen = kind if kind is not None else (available[0] if available else "reliability")
    if chosen not in available:
        raise RequestValidationError([detail_entry(
            ["query", "kind"], str(charts.ChartNotApplicable(chosen, available)),
            "chart_not_applicable")])
    body = await asyncio.to_thread(charts.render, chosen, response, fmt)
    return Response(content=body, media_type=charts.MEDIA_TYPES[fmt])


def _sync_route(router: APIRouter, name: str, examples: dict[str, dict[str, Any]]) -> None:
    kind = KINDS[name]
    request_model = kind.request

    async def post_chart(
        body: Annotated[request_model, Body(openapi_examples=examples)],  # type: ignore[valid-type]
        context: ContextDep,
        chart: Annotated[ChartKind | None, _kind_query()] = None,
        fmt: Annotated[ImageFormat, _format_query()] = "svg",
    ) -> Response:
        if chart is not None and chart not in POSSIBLE[name]:
            raise RequestValidationError([detail_entry(
                ["query", "kind"], str(charts.ChartNotApplicable(chart, sorted(POSSIBLE[name]))),
                "chart_not_applicable")])
        result = await pipeline.run(kind, body, context)
        return await picture(result, chart, fmt)

    post_chart.__doc__ = (
        f"Compute the request exactly as POST /v1/{PATHS[name]} does and answer with a chart "
        "of the result instead of JSON.")
    router.add_api_route(
        f"/{PATHS[name]}/chart", post_chart, methods=["POST"], response_class=Response,
        summary=f"Chart of a {name.replace('_', ' ')} request", responses={
            **IMAGE_RESPONSE, **ERROR_RESPONSES}, name=f"{name}_chart",
    )


def build_router(*, examples: dict[str, dict[str, dict[str, Any]]]) -> APIRouter:
    """``examples`` by kind name, shown on the synchronous chart routes."""
    router = APIRouter(prefix="/v1", tags=["charts"])
    for name in PATHS:  # the kinds that have charts (a fit has none)
        _sync_route(router, name, examples.get(name, {}))

    @router.get(
        "/runs/{run_id}/items/{item_id}/chart", response_class=Response,
        summary="Chart of a run's item",
        responses={
            **IMAGE_RESPONSE,
            404: {"model": ErrorBody, "description": "No such run, or no such item in it."},
            409: {"model": ErrorBody, "description": "The item has no result yet (queued or "
                  "running) or will have none (failed, cancelled)."},
            422: {"model": ErrorBody, "description": "Unknown kind or format, or a kind with "
                  "nothing to show for this item (the message lists those that apply)."},
        },
    )
    async def get_item_chart(
        run_id: str, item_id: str, worker: WorkerDep, caller: CallerDep,
        chart: Annotated[ChartKind | None, _kind_query()] = None,
        fmt: Annotated[ImageFormat, _format_query()] = "svg",
    ) -> Response:
        """The chart of one computed item of a run, from its stored result."""
        run, batch = await load_run(worker, run_id, owner=caller.owner)
        item = done_item(run, batch, item_id)
        response = KINDS[item.kind].response.model_validate(item.result)
        return await picture(response, chart, fmt)

    return router
