"""POST /v1/ruin: ruin probabilities of a compound Poisson surplus process at a list of capitals,
and the capital for a target ruin probability.

``handle`` is the whole computation of the endpoint; the route and batch runs (through
``service.kinds.KINDS``) both call it, so the two paths give the same answer.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Body
from pydantic import BaseModel

import core
from core.errors import LimitError, TailgaugeError
from service import compute, limits, translate
from service.deps import MetricsDep, PoolDep, SettingsDep
from service.examples import load_examples
from service.executor import ComputePool
from service.metrics import Metrics
from service.routes.responses import ERROR_RESPONSES
from service.schemas.ruin import ProcessSpec, RuinRequest, RuinResponse
from service.settings import Settings


def _check_path_claims(process: core.SurplusProcess, horizon: float | None,
                       settings: Settings) -> None:
    # With a horizon every simulated path draws about lambda T claims: the cost of one path,
    # limited as a portfolio's claims per period are.
    if horizon is None:
        return
    claims = process.claim_rate * horizon
    if claims > settings.max_expected_claims:
        raise LimitError(
            "horizon",
            f"gives {claims:.6g} expected claims per path (claim_rate x horizon); at most "
            f"{settings.max_expected_claims:g} are allowed (server limit max_expected_claims)",
        )


def _engine_error(exc: TailgaugeError) -> TailgaugeError:
    # The engine sums ladder heights as a one-line portfolio (Pollaczek-Khinchine) and calls
    # request-wide trouble "portfolio": for the caller both are the process.
    return translate.renamed(exc, "portfolio", "process")


async def handle(
    request: BaseModel, settings: Settings, pool: ComputePool, metrics: Metrics
) -> RuinResponse:
    """Compute the response of one ruin request (server limits included)."""
    if not isinstance(request, RuinRequest):
        raise TypeError(f"expected a RuinRequest, got {type(request).__name__}")
    body = request
    limits.check_list_length(
        "capital", len(body.capital), settings.max_thresholds, "max_thresholds"
    )
    process = translate.ruin_process(body.process)
    _check_path_claims(process, body.horizon, settings)
    budget = limits.budget(body.precision, settings)
    seed = body.seed if body.seed is not None else compute.draw_seed()
    try:
        result = await compute.run_engine(
            pool,
            core.ruin_probability,
            process,
            body.capital,
            wall_limit_s=budget.wall_limit_s,
            horizon=body.horizon,
            target_probability=body.target_probability,
            method=body.method,
            precision=budget.precision,
            seed=seed,
        )
    except TailgaugeError as exc:
        raise _engine_error(exc) from exc
    metrics.samples.labels("ruin").inc(translate.ruin_samples(result))
    notes = budget.warnings + budget.stop_warnings(
        result.stopped_by, body.precision.relative_error
    )
    return translate.ruin_response(result, process, warnings=notes)


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
        settings: SettingsDep,
        pool: PoolDep,
        metrics: MetricsDep,
    ) -> RuinResponse:
        """psi(u), the probability that the surplus u + c t - (claims paid up to t) ever falls
        below 0 (by time T with a horizon), for every capital u, with a 95% interval (rigorous
        bounds for recursion), the classical approximation beside it, and with
        target_probability the smallest capital that keeps psi at or below the target. The
        claims need a finite mean (e.g. Pareto alpha > 1, or a retention). When the premium
        does not exceed the expected claims (net profit condition), ruin is certain: every
        probability is 1, with a warning and no simulation."""
        return await handle(body, settings, pool, metrics)

    return router
