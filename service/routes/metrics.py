"""GET /metrics: the app's Prometheus metrics in the text exposition format."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

from fastapi import APIRouter, Response
from prometheus_client import CONTENT_TYPE_LATEST

from service.deps import MetricsDep


def build_router() -> APIRouter:
    router = APIRouter(tags=["metrics"])

    @router.get(
        "/metrics",
        response_model=str,  # documented as text; the body is the exposition format
        response_class=Response,
        summary="Prometheus metrics",
        responses={200: {"content": {CONTENT_TYPE_LATEST: {}}, "description": "Metrics."}},
    )
    async def get_metrics(metrics: MetricsDep) -> Response:
        return Response(content=metrics.render(), media_type=CONTENT_TYPE_LATEST)

    return router
