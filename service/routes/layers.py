"""POST /v1/layers: expected losses and attachment / exhaustion probabilities of aggregate
layers of the portfolio loss S, all from one sample set.

The computation is ``service.resources.LAYERS`` run by ``service.pipeline``, exactly as a
batch item of the same kind.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from typing import Annotated, Any

from fastapi import APIRouter, Body

from service import pipeline
from service.deps import ContextDep
from service.resources import LAYERS
from service.routes.responses import ERROR_RESPONSES
from service.schemas.layers import LayersRequest, LayersResponse


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
        context: ContextDep,
    ) -> LayersResponse:
        """For every aggregate layer (limit xs attachment) of the portfolio's loss S over one
        period: the expected loss to the layer E[min((S - attachment)+, limit)], the
        probability that it is hit and that it is exhausted, each with a 95% interval, from
        one sample set."""
        return await pipeline.run(LAYERS, body, context)

    return router
