"""GET /v1/health: liveness, answered on the event loop even while computations run."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from importlib.metadata import PackageNotFoundError, version

from fastapi import APIRouter, Request

import core
from service.deps import PoolDep
from service.schemas.health import HealthResponse, StoreStatus
from service.worker import RunWorker


def _service_version() -> str:
    try:
        return version("tailgauge")
    except PackageNotFoundError:  # running from a source tree that was never installed
        return "unknown"


def build_router() -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["health"])
    service_version = _service_version()

    @router.get("/health", response_model=HealthResponse, summary="Service health")
    async def get_health(pool: PoolDep, request: Request) -> HealthResponse:
        worker: RunWorker = request.app.state.runs
        fault = worker.store_fault  # remembered from the last store operations: no disk I/O
        store = StoreStatus(status="ok", message=None, since=None) if fault is None else (
            StoreStatus(status=fault.kind, message=fault.message, since=fault.since))
        return HealthResponse(
            status="ok" if fault is None else "degraded",
            store=store,
            engine_version=core.ENGINE_VERSION,
            service_version=service_version,
            executor=pool.kind,
            workers=pool.workers,
            computations_in_flight=pool.in_flight,
        )

    return router
