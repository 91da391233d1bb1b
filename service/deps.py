"""Dependencies as Annotated aliases: the app's settings, compute pool, metrics, and the
computation context that holds all three."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from service.executor import ComputePool
from service.metrics import Metrics
from service.pipeline import Context
from service.settings import Settings


def _settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


def _pool(request: Request) -> ComputePool:
    pool: ComputePool = request.app.state.pool
    return pool


def _metrics(request: Request) -> Metrics:
    metrics: Metrics = request.app.state.metrics
    return metrics


def _context(request: Request) -> Context:
    return Context(settings=_settings(request), pool=_pool(request), metrics=_metrics(request),
                   gone=request.is_disconnected)


SettingsDep = Annotated[Settings, Depends(_settings)]
PoolDep = Annotated[ComputePool, Depends(_pool)]
MetricsDep = Annotated[Metrics, Depends(_metrics)]
ContextDep = Annotated[Context, Depends(_context)]
