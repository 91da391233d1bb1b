"""POST /v1/layers: expected losses and attachment / exhaustion probabilities of aggregate
layers of the portfolio loss S, all from one sample set.

``handle`` is the whole computation of the endpoint; the route and batch runs (through
``service.kinds.KINDS``) both call it, so the two paths give the same answer.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from typing import Annotated, Any

from fastapi import APIRouter, Body
from pydantic import BaseModel

from core import measures
from core.errors import TailgaugeError
from core.parameter_figures import tail_estimates_with_parameter_risk
from service import compute, limits, parameter_risk, translate
from service.deps import MetricsDep, PoolDep, SettingsDep
from service.executor import ComputePool
from service.metrics import Metrics
from service.routes.responses import ERROR_RESPONSES
from service.schemas.layers import LayersRequest, LayersResponse
from service.settings import Settings


async def handle(
    request: BaseModel, settings: Settings, pool: ComputePool, metrics: Metrics
) -> LayersResponse:
    """Compute the response of one layers request (server limits included)."""
    if not isinstance(request, LayersRequest):
        raise TypeError(f"expected a LayersRequest, got {type(request).__name__}")
    body = request
    limits.check_list_length(
        "layers", len(body.layers), settings.max_thresholds, "max_thresholds"
    )
    job = compute.prepare(body, settings)
    for i, layer in enumerate(body.layers):
        if layer.limit is None:  # a limited layer's loss is bounded, so it always exists
            translate.check_finite_means(
                job.portfolio, f"the expected loss of the unlimited layers[{i}]"
            )
    try:
        result, nested = await parameter_risk.run(
            pool,
            body.portfolio,
            measures.tail_estimates,
            tail_estimates_with_parameter_risk,
            job.portfolio,
            wall_limit_s=job.budget.wall_limit_s,
            layers=translate.layers(body.layers),
            method=body.method,
            precision=job.budget.precision,
            seed=job.seed,
        )
    except TailgaugeError as exc:
        # The engine names its points (the layers' ends) "thresholds".
        raise translate.renamed(exc, "thresholds", "layers") from exc
    metrics.samples.labels("layers").inc(int(result.samples))
    notes = job.budget.warnings + job.budget.stop_warnings(
        result.stopped_by, body.precision.relative_error
    )
    response = translate.layers_response(result, warnings=notes)
    if nested is not None:
        parameter_risk.attach_layers(response, nested)
    return response


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["layers"])

    @router.post(
        "/layers",
        response_model=LayersResponse,
        summary="Expected losses of aggregate layers",
        responses=ERROR_RESPONSES,
    )
    async def post_layers(
        body: Annotated[LayersRequest, Body(openapi_examples=examples)],
        settings: SettingsDep,
        pool: PoolDep,
        metrics: MetricsDep,
    ) -> LayersResponse:
        """For every aggregate layer (limit xs attachment) of the portfolio's loss S over one
        period: the expected loss to the layer E[min((S - attachment)+, limit)], the
        probability that it is hit and that it is exhausted, each with a 95% interval, from
        one sample set."""
        return await handle(body, settings, pool, metrics)

    return router
