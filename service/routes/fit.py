"""POST /v1/fit: severity and count laws fitted to loss data.

``handle`` is the whole computation of the endpoint; the route and batch runs (through
``service.kinds.KINDS``) both call it, so the two paths give the same answer.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Body
from pydantic import BaseModel

from core.fitting.api import fit_claims
from service import compute, fit_translate
from service.deps import MetricsDep, PoolDep, SettingsDep
from service.examples import load_examples
from service.executor import ComputePool
from service.metrics import Metrics
from service.routes.responses import ERROR_RESPONSES
from service.schemas.fit import FitRequest, FitResponse
from service.settings import Settings


async def handle(
    request: BaseModel, settings: Settings, pool: ComputePool, metrics: Metrics
) -> FitResponse:
    """Compute the response of one fit request."""
    if not isinstance(request, FitRequest):
        raise TypeError(f"expected a FitRequest, got {type(request).__name__}")
    body = request
    seed = body.seed if body.seed is not None else compute.draw_seed()
    report = await compute.run_engine(
        pool, fit_claims, body.claims, wall_limit_s=settings.time_limit_s
        + settings.time_limit_grace_s,
        reporting_threshold=body.reporting_threshold, censored_at=body.censored_at,
        families=body.families, tail_threshold=body.tail_threshold, counts=body.counts,
        exposures=body.exposures, replicates=body.bootstrap.replicates,
        max_claims=body.bootstrap.max_claims, seed=seed)
    del metrics  # a fit draws no portfolio samples
    return fit_translate.fit_response(report)


def fit_examples(directory: Path, model: type[BaseModel]) -> dict[str, dict[str, Any]]:
    """openapi_examples/fit_*.json, described by their data (they have no lines)."""
    examples = load_examples(directory, "fit", model)
    for example in examples.values():
        value = example["value"]
        example["description"] = (
            f"{len(value['claims'])} claims"
            + (f" above {value['reporting_threshold']:g}" if value.get("reporting_threshold")
               else "")
            + (f", {len(value['counts'])} periods of counts" if value.get("counts") else ""))
    return examples


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["fit"])

    @router.post(
        "/fit",
        response_model=FitResponse,
        summary="Fit claim-size and claim-count laws to loss data",
        responses=ERROR_RESPONSES,
    )
    async def post_fit(
        body: Annotated[FitRequest, Body(openapi_examples=examples)],
        settings: SettingsDep,
        pool: PoolDep,
        metrics: MetricsDep,
    ) -> FitResponse:
        """Maximum-likelihood fits of the severity families (left truncation at the
        reporting threshold and right censoring at policy limits in the likelihood), with
        standard errors from the observed information, AIC/BIC, Kolmogorov-Smirnov,
        Cramer-von Mises and Anderson-Darling tests with parametric-bootstrap p-values, QQ
        points, tail diagnostics, Poisson and negative binomial count fits, and each law as
        the ready JSON of a portfolio line (with its parameter_uncertainty)."""
        return await handle(body, settings, pool, metrics)

    return router
