"""Batch submission: whole-batch checks (a 422 naming each problem), the fingerprint that makes a
resubmission idempotent, and the seed drawn for every item that gives none, so that a repeat of
the stored batch is exact."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel, ValidationError

from service import pipeline
from service.errors import detail_entry
from service.pipeline import draw_seed
from service.schemas.runs import RunBatchIn, RunItemIn
from service.settings import Settings
from service.store import NewItem

Kind = pipeline.Resource[Any, Any]


class BatchRejected(Exception):
    """The batch as a whole is malformed: 422 with these detail entries."""

    def __init__(self, detail: list[dict[str, Any]]) -> None:
        super().__init__("; ".join(entry["msg"] for entry in detail))
        self.detail = detail


class IdempotencyConflict(Exception):
    """The idempotency key names an earlier run of a different batch."""

    def __init__(self, run_id: str) -> None:
        super().__init__(run_id)
        self.run_id = run_id


def batch_hash(batch: RunBatchIn) -> str:
    """Fingerprint of the batch as sent (before seeds are drawn), for idempotent resubmission."""
    canonical = json.dumps(batch.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canonical.encode()).hexdigest()


def _check_batch(batch: RunBatchIn, kinds: Mapping[str, Kind], settings: Settings) -> None:
    problems: list[dict[str, Any]] = []
    if len(batch.items) > settings.max_run_items:
        problems.append(detail_entry(
            ["body", "items"],
            f"holds {len(batch.items)} items; at most {settings.max_run_items} are allowed "
            "(server limit max_run_items)",
            "limit_exceeded",
        ))
    first: dict[str, int] = {}
    for i, item in enumerate(batch.items):
        if item.kind not in kinds:
            offered = ", ".join(sorted(kinds))
            problems.append(detail_entry(
                ["body", "items", i, "kind"],
                f"kind '{item.kind}' is not available on this server yet (available: {offered})",
                "kind_unavailable",
            ))
        if item.id in first:
            problems.append(detail_entry(
                ["body", "items", i, "id"],
                f"duplicate id '{item.id}' (also items[{first[item.id]}].id); ids must be unique "
                "within a batch",
                "duplicate_id",
            ))
        first.setdefault(item.id, i)
    if problems:
        raise BatchRejected(problems)


def validate_request(kind: Kind, request: Any) -> BaseModel:
    # The mode FastAPI validates a request body in, so that the errors are the endpoint's.
    parsed: BaseModel = kind.request.model_validate(request, from_attributes=True)
    return parsed


def _with_seed(item: RunItemIn, kind: Kind) -> NewItem:
    """Draw the seed of a request that gives none, so that a repeat of the run is exact."""
    request = item.request
    try:
        parsed = validate_request(kind, request)
    except ValidationError:
        return NewItem(item_id=item.id, kind=item.kind, request=request, seed=None)
    seed = getattr(parsed, "seed", None)
    if seed is None and isinstance(request, dict):
        seed = draw_seed()
        request = {**request, "seed": seed}
    return NewItem(item_id=item.id, kind=item.kind, request=request, seed=seed)


def prepare_batch(
    batch: RunBatchIn, *, kinds: Mapping[str, Kind], settings: Settings
) -> list[NewItem]:
    """Check the batch as a whole (BatchRejected) and fix every item's seed."""
    _check_batch(batch, kinds, settings)
    return [_with_seed(item, kinds[item.kind]) for item in batch.items]
