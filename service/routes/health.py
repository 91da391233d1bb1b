"""GET /v1/health: liveness, answered on the event loop even while computations run."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from importlib.metadata import PackageNotFoundError, version

from fastapi import APIRouter

import core
from service.deps import PoolDep
from service.schemas.health import HealthResponse


def _service_version() -> str:
    try:
        return version("tailgauge")
    except PackageNotFoundError:  # running from a source tree that was never installed
        return "unknown"


def build_router() -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["health"])
    service_version = _service_version()

    @router.get("/health", response_model=HealthResponse, summary="Service health")
    async def get_health(pool: PoolDep) -> HealthResponse:
        return HealthResponse(
            status="ok",
            engine_version=core.ENGINE_VERSION,
            service_version=service_version,
            executor=pool.kind,
            workers=pool.workers,
            computations_in_flight=pool.in_flight,
        )

    return router
