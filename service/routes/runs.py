"""/v1/runs: batches of requests computed in the background, stored, listed and cancelled."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations,
# which refer to names local to build_router.

import base64
import binascii
import json
from pathlib import Path
from typing import Annotated, Any

from fastapi import APIRouter, Body, Depends, Header, HTTPException, Query, Request, Response
from fastapi.exceptions import RequestValidationError

from service.auth import CallerDep
from service.batches import BatchRejected, IdempotencyConflict
from service.errors import detail_entry
from service.examples import load_examples
from service.routes.responses import ERROR_RESPONSES, ErrorBody
from service.schemas.runs import RunAccepted, RunBatchIn, RunList, RunOut, RunStatusName
from service.worker import RunWorker, summary

IDEMPOTENCY_HEADER = "Idempotency-Key"
PAGE_DEFAULT = 50
PAGE_MAX = 500
# SQLite integers are 64-bit; a larger offset overflowed in the store (500). Far beyond any
# real listing, and JSON-safe.
OFFSET_MAX = 2**53 - 1


def _worker(request: Request) -> RunWorker:
    worker: RunWorker = request.app.state.runs
    return worker


WorkerDep = Annotated[RunWorker, Depends(_worker)]

_STORE_UNAVAILABLE: dict[int | str, dict[str, Any]] = {
    503: {"model": ErrorBody, "description": "The run store cannot be used now (disk full: "
          "store_full; locked by another process: store_busy; I/O error: store_error); "
          "retry after the Retry-After seconds."},
}
_NOT_FOUND: dict[int | str, dict[str, Any]] = {
    404: {"model": ErrorBody, "description": "No run with this run_id (or it belongs to "
          "another token)."},
    **_STORE_UNAVAILABLE,
}


def run_examples(directory: Path) -> dict[str, dict[str, Any]]:
    examples = load_examples(directory, "runs", RunBatchIn)
    for example in examples.values():
        items = example["value"]["items"]
        kinds = sorted({item["kind"] for item in items})
        example["description"] = f"{len(items)} items: {', '.join(kinds)}"
    return examples


def _not_found(run_id: str) -> HTTPException:
    return HTTPException(404, detail=[
        detail_entry(["path", "run_id"], f"no run with run_id '{run_id}'", "not_found")
    ])


def _encode_cursor(seq: int) -> str:
    return base64.urlsafe_b64encode(json.dumps({"before": seq}).encode()).decode()


def _decode_cursor(cursor: str) -> int:
    try:
        before = json.loads(base64.urlsafe_b64decode(cursor.encode()))["before"]
    except (binascii.Error, ValueError, TypeError, KeyError):
        before = None
    if not isinstance(before, int) or isinstance(before, bool) or not 0 <= before <= OFFSET_MAX:
        raise RequestValidationError([detail_entry(
            ["query", "cursor"], "is not a cursor returned by GET /v1/runs", "cursor_invalid"
        )])
    return before


def build_router(*, examples: dict[str, dict[str, Any]]) -> APIRouter:
    router = APIRouter(prefix="/v1", tags=["runs"])

    @router.post(
        "/runs",
        status_code=202,
        response_model=RunAccepted,
        summary="Submit a batch run",
        responses={
            200: {"model": RunAccepted, "description": "The run already submitted with this "
                  "Idempotency-Key and the same batch (no new run)."},
            409: {"model": ErrorBody, "description": "The Idempotency-Key was used for a "
                  "different batch."},
            **ERROR_RESPONSES,
            **_STORE_UNAVAILABLE,
        },
    )
    async def post_run(
        body: Annotated[RunBatchIn, Body(openapi_examples=examples)],
        worker: WorkerDep,
        caller: CallerDep,
        response: Response,
        idempotency_key: Annotated[str | None, Header(
            alias=IDEMPOTENCY_HEADER, min_length=1, max_length=200,
            description="Makes the submission safe to retry: a batch sent again with the same "
            "key returns the existing run (200) instead of starting a second one; the same "
            "key with a different batch is refused (409).",
        )] = None,
    ) -> RunAccepted:
        """Store the batch and compute its items in the background (202). Each item's result
        is the body its synchronous endpoint would return; poll GET /v1/runs/{run_id}."""
        try:
            run, created = await worker.submit(body, idempotency_key=idempotency_key,
                                               owner=caller.owner)
        except BatchRejected as exc:
            raise RequestValidationError(exc.detail) from None
        except IdempotencyConflict as exc:
            raise HTTPException(409, detail=[detail_entry(
                ["header", IDEMPOTENCY_HEADER],
                f"was already used for a different batch (run {exc.run_id}); use a new key "
                "for a new batch",
                "idempotency_conflict",
            )]) from None
        if not created:
            response.status_code = 200
        return RunAccepted(run_id=run.run_id, status=run.status)

    @router.get("/runs", response_model=RunList, summary="List runs",
                responses={**ERROR_RESPONSES, **_STORE_UNAVAILABLE})
    async def list_runs(
        worker: WorkerDep,
        caller: CallerDep,
        status: Annotated[RunStatusName | None, Query(
            description="Only runs with this status.")] = None,
        limit: Annotated[int, Query(
            ge=1, le=PAGE_MAX, description="Most runs on the page.")] = PAGE_DEFAULT,
        offset: Annotated[int | None, Query(
            ge=0, le=OFFSET_MAX,
            description="Skip this many runs (newest first); not with cursor.")] = None,
        cursor: Annotated[str | None, Query(
            description="next_cursor of the previous page; not with offset.")] = None,
    ) -> RunList:
        """Runs, newest first, without their results: page with limit and offset, or with
        the cursor of the previous page (stable while new runs arrive)."""
        if offset is not None and cursor is not None:
            raise RequestValidationError([detail_entry(
                ["query", "cursor"], "give either offset or cursor, not both", "value_error"
            )])
        before = None if cursor is None else _decode_cursor(cursor)
        page = await worker.list_runs(status=status, limit=limit + 1, offset=offset or 0,
                                      before_seq=before, owner=caller.owner)
        more = len(page) > limit
        page = page[:limit]
        return RunList(
            runs=[summary(run) for run in page],
            next_cursor=_encode_cursor(page[-1].seq) if more else None,
        )

    @router.get("/runs/{run_id}", response_model=RunOut, summary="Status and results of a run",
                responses=_NOT_FOUND)
    async def get_run(run_id: str, worker: WorkerDep, caller: CallerDep) -> RunOut:
        """Status, progress and the results of the run's finished items."""
        view = await worker.view(run_id, owner=caller.owner)
        if view is None:
            raise _not_found(run_id)
        return view

    @router.get("/runs/{run_id}/batch", response_model=RunBatchIn,
                summary="The batch of a run, seeds included", responses=_NOT_FOUND)
    async def get_run_batch(run_id: str, worker: WorkerDep, caller: CallerDep) -> RunBatchIn:
        """The batch as stored, with the seed of every item: POST it again to repeat the run
        exactly (same engine version, same figures)."""
        batch = await worker.batch(run_id, owner=caller.owner)
        if batch is None:
            raise _not_found(run_id)
        return batch

    @router.delete("/runs/{run_id}", response_model=RunOut, summary="Cancel a run",
                   responses=_NOT_FOUND)
    async def cancel_run(run_id: str, worker: WorkerDep, caller: CallerDep) -> RunOut:
        """Queued items are not run; running ones may finish and keep their results. A run
        that has already finished is left as it is (the call is safe to repeat)."""
        view = await worker.cancel(run_id, owner=caller.owner)
        if view is None:
            raise _not_found(run_id)
        return view

    return router

