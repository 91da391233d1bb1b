"""Schema of GET /v1/health."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field


class HealthResponse(BaseModel):
    status: Literal["ok"] = Field(description="Always 'ok' when the server answers.")
    engine_version: str = Field(description="Version of the computation engine.")
    service_version: str = Field(description="Version of the tailgauge service package.")
    executor: str = Field(description="Kind of computation pool: process or thread.")
    workers: int = Field(description="Size of the computation pool.")
    computations_in_flight: int = Field(
        description="Computations submitted to the pool and not yet finished."
    )
