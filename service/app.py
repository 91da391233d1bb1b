"""The ASGI application: ``service.app:app``, built by ``create_app(settings)``."""

from __future__ import annotations

import os
import sys
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import NoReturn

from fastapi import Depends, FastAPI

from service.auth import AUTH_RESPONSES, AuthConfig, AuthConfigError, authenticate, load_auth
from service.body_limit import BodyLimitMiddleware
from service.datadir import DataDirError
from service.errors import InternalErrorMiddleware, install_error_handlers
from service.examples import load_examples
from service.executor import ComputePool
from service.metrics import Metrics, MetricsMiddleware, route_templates
from service.routes import (
    charts,
    docs,
    exceedance,
    fit,
    health,
    layers,
    metrics,
    report,
    risk_measures,
    ruin,
    runs,
    ui,
)
from service.routes.responses import INTERNAL_ERROR
from service.schemas.exceedance import ExceedanceRequest
from service.schemas.fit import FitRequest
from service.schemas.layers import LayersRequest
from service.schemas.risk_measures import RiskMeasuresRequest
from service.settings import Settings
from service.worker import RunWorker

DESCRIPTION = """\
Tail-risk figures of a portfolio loss model from variance-reduced Monte Carlo: exceedance
probabilities, value-at-risk and tail value-at-risk, return-period losses, aggregate layer
losses and ruin probabilities of a surplus process, each with a 95% interval, the seed that
reproduces it and the precision reached.

**Cautions.** Model risk dominates sampling error: the intervals cover the sampling error of
the stated model only (plus its parameter uncertainty where a line carries
`parameter_uncertainty`; the choice of family is never covered). Results are estimates for
that model, not advice. Capital and reserving figures follow the local regulator's rules and
need a qualified actuary's sign-off.

**Errors.** Every error body is `{"detail": [{"loc": [...], "msg": ..., "type": ...}]}`, whatever
the status: the ones each operation lists below, and 404 (`not_found`, a path the API does not
have) and 405 (`method_not_allowed`, with an `Allow` header) for requests outside it. A body that
is not JSON (invalid UTF-8, an integer literal of thousands of digits, nesting too deep) is a 422
`json_invalid`.
"""


def _refuse_to_start(line: str) -> NoReturn:
    # One line and a non-zero exit, also under a bare `uvicorn service.app:app` (an
    # exception here would make the ASGI server print the whole traceback).
    print(f"tailgauge: cannot start: {line}", file=sys.stderr, flush=True)
    os._exit(2)


def create_app(settings: Settings | None = None, *, exit_on_start_failure: bool = False) -> FastAPI:
    """The app. ``exit_on_start_failure``: a data dir that cannot be used ends the process
    with one line (for the module-level app an ASGI server runs) instead of raising."""
    settings = settings if settings is not None else Settings()
    instruments = Metrics()
    pool = ComputePool(kind=settings.executor, workers=settings.workers, metrics=instruments,
                       dask_scheduler=settings.dask_scheduler)
    runs_worker = RunWorker(settings=settings, pool=pool, metrics=instruments)
    try:
        auth: AuthConfig | AuthConfigError = load_auth(settings)
    except AuthConfigError as exc:
        auth = exc  # refused at start-up, below; until then nothing is let through

    @asynccontextmanager
    async def lifespan(_: FastAPI) -> AsyncIterator[None]:
        if isinstance(auth, AuthConfigError):
            if exit_on_start_failure:
                _refuse_to_start(str(auth))
            raise auth
        pool.start()
        try:
            # Locks the data dir and requeues the items a stopped server left running.
            await runs_worker.start()
        except DataDirError as exc:
            pool.shutdown()
            if exit_on_start_failure:
                _refuse_to_start(str(exc))
            raise
        try:
            yield
        finally:
            await runs_worker.stop()
            pool.shutdown()

    # docs_url / redoc_url None: FastAPI's pages load their assets from a CDN; ours are served
    # by the app (service/routes/docs.py).
    app = FastAPI(title="tailgauge", version="1", description=DESCRIPTION, lifespan=lifespan,
                  docs_url=None, redoc_url=None, responses=INTERNAL_ERROR)
    app.state.settings = settings
    app.state.metrics = instruments
    app.state.pool = pool
    app.state.runs = runs_worker
    app.state.auth = AuthConfig(enabled=True) if isinstance(auth, AuthConfigError) else auth
    install_error_handlers(app)
    examples = {
        "exceedance": load_examples(settings.examples_dir, "exceedance", ExceedanceRequest),
        "risk_measures": load_examples(
            settings.examples_dir, "risk_measures", RiskMeasuresRequest),
        "layers": load_examples(settings.examples_dir, "layers", LayersRequest),
        "ruin": ruin.ruin_examples(settings.examples_dir),
    }
    guarded = [  # every route here needs a token when authentication is on
        exceedance.build_router(examples=examples["exceedance"]),
        risk_measures.build_router(examples=examples["risk_measures"]),
        layers.build_router(examples=examples["layers"]),
        ruin.build_router(examples=examples["ruin"]),
        fit.build_router(examples=fit.fit_examples(settings.examples_dir, FitRequest)),
        runs.build_router(examples=runs.run_examples(settings.examples_dir)),
        charts.build_router(examples=examples),
        report.build_router(),
    ]
    open_routers = [  # pages without data, probes and scrapers
        ui.build_router(),
        docs.build_router(title=app.title, openapi_url=app.openapi_url or "/openapi.json"),
        health.build_router(),
        metrics.build_router(),
    ]
    for router in guarded:
        app.include_router(router, dependencies=[Depends(authenticate)],
                           responses=AUTH_RESPONSES)
    for router in open_routers:
        app.include_router(router)
    routers = guarded + open_routers
    # Added last = outermost: metrics see every answer, including the body limit's 413 and
    # the 500 of a bug (answered inside, so that the connection is kept).
    app.add_middleware(InternalErrorMiddleware)
    app.add_middleware(BodyLimitMiddleware, max_body_bytes=settings.max_body_bytes)
    app.add_middleware(
        MetricsMiddleware, metrics=instruments, templates=route_templates(routers)
    )
    return app


app = create_app(exit_on_start_failure=True)
