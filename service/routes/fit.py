"""POST /v1/fit: severity and count laws fitted to loss data.

The computation is ``service.resources.FIT`` run by ``service.pipeline``, exactly as a batch
item of the same kind.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Body
from pydantic import BaseModel

from service import pipeline
from service.deps import ContextDep
from service.examples import load_examples
from service.resources import FIT
from service.routes.responses import ERROR_RESPONSES
from service.schemas.fit import FitRequest, FitResponse


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
        context: ContextDep,
    ) -> FitResponse:
        """Maximum-likelihood fits of the severity families (left truncation at the
        reporting threshold and right censoring at policy limits in the likelihood), with
        standard errors from the observed information, AIC/BIC, Kolmogorov-Smirnov,
        Cramer-von Mises and Anderson-Darling tests with parametric-bootstrap p-values, QQ
        points, tail diagnostics, Poisson and negative binomial count fits, and each law as
        the ready JSON of a portfolio line (with its parameter_uncertainty)."""
        return await pipeline.run(FIT, body, context)

    return router
