"""Schema of GET /v1/health."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field


class StoreStatus(BaseModel):
    status: Literal["ok", "store_full", "store_busy", "store_error"] = Field(
        description="The run store as its last operations found it: ok, or the fault of the "
        "last failed write or read (store_full: disk or size cap full; store_busy: locked by "
        "another process; store_error: I/O or database error)."
    )
    message: str | None = Field(description="What the fault means; null when ok.")
    since: str | None = Field(description="When the fault began (ISO 8601); null when ok.")


class HealthResponse(BaseModel):
    status: Literal["ok", "degraded"] = Field(
        description="'ok', or 'degraded' while the run store fails (see store): synchronous "
        "computations still work, run submissions and results answer 503."
    )
    store: StoreStatus = Field(description="State of the run store, from its last operations.")
    engine_version: str = Field(description="Version of the computation engine.")
    service_version: str = Field(description="Version of the tailgauge service package.")
    executor: str = Field(description="Kind of computation pool: process or thread.")
    workers: int = Field(description="Size of the computation pool.")
    computations_in_flight: int = Field(
        description="Computations submitted to the pool and not yet finished."
    )
