"""Prometheus metrics, one registry per app instance (so tests do not share counters)."""

from __future__ import annotations

import re
import time
from collections.abc import Iterable

from fastapi import APIRouter
from fastapi.routing import APIRoute
from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram, generate_latest
from starlette.types import ASGIApp, Message, Receive, Scope, Send

UNMATCHED_ROUTE = "<unmatched>"
LATENCY_BUCKETS = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120)


class Metrics:
    """The service's instruments, all registered in ``self.registry``."""

    def __init__(self) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        self.requests = Counter(
            "tailgauge_http_requests",
            "HTTP requests answered, by method, route template and status code.",
            ["method", "route", "status"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "tailgauge_http_request_duration_seconds",
            "Time from request to the end of the response, by method and route template.",
            ["method", "route"],
            buckets=LATENCY_BUCKETS,
            registry=self.registry,
        )
        self.samples = Counter(
            "tailgauge_samples_drawn",
            "Monte Carlo samples (simulated periods) drawn by the engine, by resource.",
            ["resource"],
            registry=self.registry,
        )
        self.in_flight = Gauge(
            "tailgauge_computations_in_flight",
            "Computations submitted to the pool and not yet finished.",
            registry=self.registry,
        )
        self.unavailable = Counter(
            "tailgauge_computations_unavailable",
            "Computations the server gave up on (time limit passed, worker lost), by reason.",
            ["reason"],
            registry=self.registry,
        )

    def render(self) -> bytes:
        return generate_latest(self.registry)


RouteTemplates = list[tuple[re.Pattern[str], str]]


def route_templates(routers: Iterable[APIRouter]) -> RouteTemplates:
    """(path regex, template) of every route, to label requests answered before routing."""
    return [
        (route.path_regex, route.path)
        for router in routers
        for route in router.routes
        if isinstance(route, APIRoute)
    ]


def _route_template(templates: RouteTemplates, scope: Scope) -> str:
    route = scope.get("route")
    if route is not None and hasattr(route, "path"):
        return str(route.path)
    # Answered before routing (e.g. 413 from the body limit): find the template ourselves.
    path = str(scope.get("path", ""))
    for regex, template in templates:
        if regex.match(path):
            return template
    return UNMATCHED_ROUTE


class MetricsMiddleware:
    """Pure ASGI middleware counting requests and timing them by route template.

    Labels use the route template (``/v1/runs/{run_id}``), never the raw path, so the number
    of series stays bounded whatever clients send.
    """

    def __init__(self, app: ASGIApp, *, metrics: Metrics, templates: RouteTemplates) -> None:
        self.app = app
        self.metrics = metrics
        self.templates = templates

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        status = 500
        started = time.perf_counter()

        async def recording_send(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = int(message["status"])
            await send(message)

        try:
            await self.app(scope, receive, recording_send)
        finally:
            route = _route_template(self.templates, scope)
            method = str(scope.get("method", ""))
            self.metrics.requests.labels(method, route, str(status)).inc()
            self.metrics.latency.labels(method, route).observe(time.perf_counter() - started)
