"""Reading one run for the routes that show it (charts, report): the one place that looks a
run up by id and answers 404, so that an access rule for runs applies to all of them."""

from __future__ import annotations

from fastapi import HTTPException

from service.errors import detail_entry
from service.schemas.runs import RunBatchIn, RunItemDone, RunOut
from service.worker import RunWorker

NOT_FOUND_RUN = "no run with run_id '{run_id}'"


def run_not_found(run_id: str) -> HTTPException:
    return HTTPException(404, detail=[
        detail_entry(["path", "run_id"], NOT_FOUND_RUN.format(run_id=run_id), "not_found")
    ])


async def load_run(
    worker: RunWorker, run_id: str, *, owner: str | None = None
) -> tuple[RunOut, RunBatchIn]:
    """The run's view (GET /v1/runs/{run_id}) and its stored batch; 404 when unknown or
    another token's (``owner``: the caller's token digest, None while auth is off)."""
    found = await worker.run_and_batch(run_id, owner=owner)
    if found is None:
        raise run_not_found(run_id)
    return found


def done_item(run: RunOut, batch: RunBatchIn, item_id: str) -> RunItemDone:
    """The finished item ``item_id`` of the run: 404 when the batch has no such item, 409
    when it has not been computed (queued, running, failed or cancelled)."""
    if all(item.id != item_id for item in batch.items):
        raise HTTPException(404, detail=[detail_entry(
            ["path", "item_id"], f"run '{run.run_id}' has no item '{item_id}'", "not_found")])
    status = "queued or running"
    for result in run.results:
        if result.id == item_id:
            if isinstance(result, RunItemDone):
                return result
            status = result.status
            break
    raise HTTPException(409, detail=[detail_entry(
        ["path", "item_id"], f"item '{item_id}' has no result to draw: it is {status}",
        "item_not_done")])
