"""Schemas of /v1/runs: named batches of requests, computed in the background and stored."""

from __future__ import annotations

import math
from typing import Annotated, Any, Literal

from pydantic import BaseModel, Field, field_validator
from pydantic_core import PydanticCustomError

from service.routes.responses import ErrorEntry
from service.schemas.common import RequestModel

KindName = Literal["exceedance", "risk_measures", "layers", "ruin", "fit"]
RunStatusName = Literal["queued", "running", "done", "failed", "cancelled"]
Label = Annotated[str, Field(strict=True, min_length=1, max_length=200)]

KIND_DESCRIPTION = (
    "Which computation the item asks for: exceedance (POST /v1/exceedance), risk_measures "
    "(POST /v1/risk-measures), layers (POST /v1/layers), ruin (POST /v1/ruin) or fit (POST "
    "/v1/fit). A kind this "
    "server does not offer yet is refused (422)."
)


def _non_finite(value: Any, path: str) -> str | None:
    """The path of the first NaN or infinite number inside a parsed JSON value, if any."""
    if isinstance(value, float) and not math.isfinite(value):
        return path
    items = value.items() if isinstance(value, dict) else (
        enumerate(value) if isinstance(value, list) else ())
    for key, inner in items:
        found = _non_finite(inner, f"{path}[{key}]" if isinstance(key, int) else f"{path}.{key}")
        if found is not None:
            return found
    return None


class RunItemIn(RequestModel):
    id: Label = Field(description="The caller's name for the item, unique within the batch.")
    kind: KindName = Field(description=KIND_DESCRIPTION)
    request: Any = Field(
        description="The body that the kind's synchronous endpoint takes. It is validated when "
        "the item runs: an invalid request fails that item only, with the 422 detail the "
        "endpoint would give. A request without a seed gets one drawn at submission. NaN, "
        "Infinity and numbers beyond double precision (1e999) are refused at submission: the "
        "stored batch is JSON, which cannot hold them."
    )

    @field_validator("request")
    @classmethod
    def _storable(cls, request: Any) -> Any:
        where = _non_finite(request, "request")
        if where is not None:
            raise PydanticCustomError(
                "finite_number",
                "{where} is NaN or infinite (or beyond double precision); a batch is stored as "
                "JSON, which has no such numbers",
                {"where": where},
            )
        return request


class RunBatchIn(RequestModel):
    name: Label = Field(description="Name of the batch, e.g. 'month-end 2025-06'.")
    items: list[RunItemIn] = Field(
        min_length=1,
        description="The requests of the batch, run in this order (several at a time). The "
        "server caps how many one batch may hold (max_run_items).",
    )


class RunAccepted(BaseModel):
    run_id: str = Field(description="Identifier of the run, for GET and DELETE /v1/runs/{run_id}.")
    status: RunStatusName = Field(description="Status of the run now.")


class ProgressOut(BaseModel):
    done: int = Field(description="Items finished (computed or failed).")
    total: int = Field(description="Items in the batch.")
    failed: int = Field(description="Items that failed (their error is in results).")
    running: int = Field(description="Items being computed now.")
    queued: int = Field(description="Items waiting to be computed.")
    cancelled: int = Field(description="Items that will not be run (the run was cancelled).")


class _ItemOutBase(BaseModel):
    id: str = Field(description="The item's id from the batch.")
    kind: KindName = Field(description="The item's kind from the batch.")
    seed: int | None = Field(
        description="Seed the item runs with (the request's own, or drawn at submission); null "
        "when the request was too malformed to hold one."
    )


class RunItemDone(_ItemOutBase):
    status: Literal["done"] = Field(description="The item was computed.")
    attempts: int = Field(description="Times the item was started (more than 1 after a restart).")
    engine_version: str = Field(description="Version of the engine that computed the result.")
    result: dict[str, Any] = Field(
        description="The body the kind's synchronous endpoint returns for this request."
    )


class RunItemFailed(_ItemOutBase):
    status: Literal["failed"] = Field(description="The item could not be computed.")
    attempts: int = Field(description="Times the item was started.")
    error: list[ErrorEntry] = Field(
        description="Why: the 422 detail list the synchronous endpoint gives for this request "
        "(type 'interrupted' when the server stopped while it ran, run_max_attempts times)."
    )


class RunItemCancelled(_ItemOutBase):
    status: Literal["cancelled"] = Field(
        description="The item was still queued when the run was cancelled: it was not run."
    )


RunItemOut = Annotated[
    RunItemDone | RunItemFailed | RunItemCancelled,
    Field(discriminator="status", description="Outcome of one finished item, by status."),
]


class RunSummary(BaseModel):
    run_id: str = Field(description="Identifier of the run.")
    name: str = Field(description="Name of the batch.")
    status: RunStatusName = Field(
        description="queued (nothing started), running, done (every item computed), failed "
        "(finished, at least one item failed; the others have results) or cancelled."
    )
    progress: ProgressOut = Field(description="Item counts by state.")
    engine_version: str = Field(description="Version of the engine when the run was submitted.")
    created_at: str = Field(description="Submission time, ISO 8601 UTC.")
    updated_at: str = Field(description="Time of the last change, ISO 8601 UTC.")


class RunOut(RunSummary):
    results: list[RunItemOut] = Field(
        description="Finished items (done, failed, cancelled) in batch order; queued and "
        "running items are counted in progress only."
    )


class RunList(BaseModel):
    runs: list[RunSummary] = Field(description="Runs, newest first.")
    next_cursor: str | None = Field(
        description="Pass as ?cursor= (with the same status filter) for the next page; null "
        "when this page is the last."
    )
