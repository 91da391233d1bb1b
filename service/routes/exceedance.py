"""POST /v1/exceedance: exceedance probabilities P(S > x) of the portfolio loss S.

``handle`` is the whole computation of the endpoint; the route and batch runs (through
``service.kinds.KINDS``) both call it, so the two paths give the same answer.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from typing import Annotated, Any

from fastapi import APIRouter, Body
from pydantic import BaseModel

import core
from core.parameter_figures import exceedance_with_parameter_risk
from service import compute, limits, parameter_risk, translate
from service.deps import MetricsDep, PoolDep, SettingsDep
from service.executor import ComputePool
from service.metrics import Metrics
from service.routes.responses import ERROR_RESPONSES
from service.schemas.exceedance import ExceedanceRequest, ExceedanceResponse
from service.settings import Settings


async def handle(
    request: BaseModel, settings: Settings, pool: ComputePool, metrics: Metrics
) -> ExceedanceResponse:
    """Compute the response of one exceedance request (server limits included)."""
    if not isinstance(request, ExceedanceRequest):
        raise TypeError(f"expected an ExceedanceRequest, got {type(request).__name__}")
    body = request
    limits.check_list_length(
        "thresholds", len(body.thresholds), settings.max_thresholds, "max_thresholds"
    )
    job = compute.prepare(body, settings)
    result, nested = await parameter_risk.run(
        pool,
        body.portfolio,
        core.exceedance,
        exceedance_with_parameter_risk,
        job.portfolio,
        body.thresholds,
        wall_limit_s=job.budget.wall_limit_s,
        method=body.method,
        precision=job.budget.precision,
        seed=job.seed,
    )
    metrics.samples.labels("exceedance").inc(translate.samples_behind(result))
    notes = job.budget.warnings + job.budget.stop_warnings(
        result.stopped_by, body.precision.relative_error
    )
    response = translate.exceedance_response(result, warnings=notes)
    if nested is not None:
        parameter_risk.attach_exceedance(response, nested)
    return response


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["exceedance"])

    @router.post(
        "/exceedance",
        response_model=ExceedanceResponse,
        summary="Exceedance probabilities of the portfolio loss",
        responses=ERROR_RESPONSES,
    )
    async def post_exceedance(
        body: Annotated[ExceedanceRequest, Body(openapi_examples=examples)],
        settings: SettingsDep,
        pool: PoolDep,
        metrics: MetricsDep,
    ) -> ExceedanceResponse:
        """P(S > x) for every threshold x, where S is the portfolio's loss over one period,
        with a 95% interval, the seed that reproduces it and the precision reached."""
        return await handle(body, settings, pool, metrics)

    return router
