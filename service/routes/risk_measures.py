"""POST /v1/risk-measures: value-at-risk, tail value-at-risk and the exceedance curve by
return period of the portfolio loss S, all from one sample set.

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
from service.schemas.risk_measures import RiskMeasuresRequest, RiskMeasuresResponse
from service.settings import Settings


def _check_lengths(body: RiskMeasuresRequest, settings: Settings) -> None:
    # Each level, return period and loss adds points to the shared estimation grid.
    for name in ("levels", "return_periods", "losses"):
        limits.check_list_length(
            name, len(getattr(body, name)), settings.max_thresholds, "max_thresholds"
        )


async def handle(
    request: BaseModel, settings: Settings, pool: ComputePool, metrics: Metrics
) -> RiskMeasuresResponse:
    """Compute the response of one risk-measures request (server limits included)."""
    if not isinstance(request, RiskMeasuresRequest):
        raise TypeError(f"expected a RiskMeasuresRequest, got {type(request).__name__}")
    body = request
    _check_lengths(body, settings)
    job = compute.prepare(body, settings)
    # The engine estimates TVaR (a stop-loss transform) with every VaR, return periods too.
    translate.check_finite_means(
        job.portfolio,
        "tail value-at-risk" if body.levels
        else "the stop-loss transform the engine estimates return-period losses with",
    )
    # Return period T is the VaR at level 1 - 1/T: one call, one sample set for everything.
    levels = [*body.levels, *(1.0 - 1.0 / t for t in body.return_periods)]
    try:
        result, nested = await parameter_risk.run(
            pool,
            body.portfolio,
            measures.tail_estimates,
            tail_estimates_with_parameter_risk,
            job.portfolio,
            wall_limit_s=job.budget.wall_limit_s,
            levels=levels,
            losses=body.losses,
            method=body.method,
            precision=job.budget.precision,
            seed=job.seed,
        )
    except TailgaugeError as exc:
        # The engine names its grid points "thresholds"; the farthest point (a loss, else a
        # level's VaR) is what such an error is about.
        field = "losses" if body.losses else "levels" if body.levels else "return_periods"
        raise translate.renamed(exc, "thresholds", field) from exc
    metrics.samples.labels("risk_measures").inc(int(result.samples))
    notes = job.budget.warnings + job.budget.stop_warnings(
        result.stopped_by, body.precision.relative_error
    )
    response = translate.risk_measures_response(
        result, n_levels=len(body.levels), return_periods=body.return_periods,
        losses=body.losses, warnings=notes,
    )
    if nested is not None:
        parameter_risk.attach_measures(response, nested, len(body.levels))
    return response


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
        settings: SettingsDep,
        pool: PoolDep,
        metrics: MetricsDep,
    ) -> RiskMeasuresResponse:
        """VaR_q and TVaR_q of the portfolio's loss S over one period at every level q, the
        loss at every return period T (VaR at 1 - 1/T) and the return period of every given
        loss, each with a 95% interval, from one sample set. TVaR needs every line's claims
        to have a finite mean (e.g. Pareto alpha > 1, or a per-claim limit)."""
        return await handle(body, settings, pool, metrics)

    return router
