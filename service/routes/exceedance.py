"""POST /v1/exceedance: exceedance probabilities P(S > x) of the portfolio loss S.

The computation is ``service.resources.EXCEEDANCE`` run by ``service.pipeline``, exactly as a
batch item of the same kind.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from typing import Annotated, Any

from fastapi import APIRouter, Body

from service import pipeline
from service.deps import ContextDep
from service.resources import EXCEEDANCE
from service.routes.responses import ERROR_RESPONSES
from service.schemas.exceedance import ExceedanceRequest, ExceedanceResponse


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
        context: ContextDep,
    ) -> ExceedanceResponse:
        """P(S > x) for every threshold x, where S is the portfolio's loss over one period,
        with a 95% interval, the seed that reproduces it and the precision reached."""
        return await pipeline.run(EXCEEDANCE, body, context)

    return router
