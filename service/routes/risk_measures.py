"""POST /v1/risk-measures: value-at-risk, tail value-at-risk and the exceedance curve by
return period of the portfolio loss S, all from one sample set.

The computation is ``service.resources.RISK_MEASURES`` run by ``service.pipeline``, exactly as a
batch item of the same kind.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from typing import Annotated, Any

from fastapi import APIRouter, Body

from service import pipeline
from service.deps import ContextDep
from service.resources import RISK_MEASURES
from service.routes.responses import ERROR_RESPONSES
from service.schemas.risk_measures import RiskMeasuresRequest, RiskMeasuresResponse


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["risk measures"])

    @router.post(
        "/risk-measures",
        response_model=RiskMeasuresResponse,
        summary="Value-at-risk, tail value-at-risk and return-period losses",
        responses=ERROR_RESPONSES,
    )
    async def post_risk_measures(
        body: Annotated[RiskMeasuresRequest, Body(openapi_examples=examples)],
        context: ContextDep,
    ) -> RiskMeasuresResponse:
        """VaR_q and TVaR_q of the portfolio's loss S over one period at every level q, the
        loss at every return period T (VaR at 1 - 1/T) and the return period of every given
        loss, each with a 95% interval, from one sample set. TVaR needs every line's claims
        to have a finite mean (e.g. Pareto alpha > 1, or a per-claim limit)."""
        return await pipeline.run(RISK_MEASURES, body, context)

    return router
