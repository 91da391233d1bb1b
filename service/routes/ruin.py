"""POST /v1/ruin: ruin probabilities of a compound Poisson surplus process at a list of capitals,
and the capital for a target ruin probability.

The computation is ``service.resources.RUIN`` run by ``service.pipeline``, exactly as a
batch item of the same kind.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Body

from service import pipeline
from service.deps import ContextDep
from service.examples import load_examples
from service.resources import RUIN
from service.routes.responses import ERROR_RESPONSES
from service.schemas.ruin import ProcessSpec, RuinRequest, RuinResponse


def _describe(process: dict[str, Any]) -> str:
    spec = ProcessSpec.model_validate(process)
    premium = (f"loading {spec.loading:g}" if spec.loading is not None
               else f"premium rate {spec.premium_rate:g}")
    text = f"claim rate {spec.claim_rate:g}, {spec.severity.family} claims, {premium}"
    text += f", retention {spec.retention:g} per claim" if spec.retention else ""
    return f"{spec.label}: {text}" if spec.label else text.capitalize()


def ruin_examples(directory: Path) -> dict[str, dict[str, Any]]:
    """openapi_examples/ruin_*.json, described by their process (they have no lines)."""
    examples = load_examples(directory, "ruin", RuinRequest)
    for example in examples.values():
        example["description"] = _describe(example["value"]["process"])
    return examples


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["ruin"])

    @router.post(
        "/ruin",
        response_model=RuinResponse,
        summary="Ruin probabilities of a surplus process",
        responses=ERROR_RESPONSES,
    )
    async def post_ruin(
        body: Annotated[RuinRequest, Body(openapi_examples=examples)],
        context: ContextDep,
    ) -> RuinResponse:
        """psi(u), the probability that the surplus u + c t - (claims paid up to t) ever falls
        below 0 (by time T with a horizon), for every capital u, with a 95% interval (rigorous
        bounds for recursion), the classical approximation beside it, and with
        target_probability the smallest capital that keeps psi at or below the target. The
        claims need a finite mean (e.g. Pareto alpha > 1, or a retention). When the premium
        does not exceed the expected claims (net profit condition), ruin is certain: every
        probability is 1, with a warning and no simulation."""
        return await pipeline.run(RUIN, body, context)

    return router
