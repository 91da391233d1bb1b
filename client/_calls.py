"""Each client method as a plain description of one HTTP call: what to send, and how to read
the answer. The sync and async clients only execute these, so the request building, the
validation against the service's own schemas and the answer parsing exist once."""

from __future__ import annotations

import hashlib
import json
import uuid
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, Generic, TypeVar

import httpx
from pydantic import BaseModel, Field, ValidationError

from client._errors import ErrorDetail, RequestRejected, error_for
from client._retry import retry_after_seconds
from client._tables import (
    ExceedanceResult,
    FitResult,
    LayersResult,
    RiskMeasuresResult,
    RuinResult,
    RunResult,
)
from service.schemas.exceedance import ExceedanceRequest
from service.schemas.fit import FitRequest
from service.schemas.layers import LayersRequest
from service.schemas.risk_measures import RiskMeasuresRequest
from service.schemas.ruin import RuinRequest
from service.schemas.runs import RunAccepted, RunBatchIn, RunList, RunSummary

__all__ = ["Call", "SubmittedRun", "batch_key", "fresh_key"]

T = TypeVar("T")
IDEMPOTENCY_HEADER = "Idempotency-Key"
TERMINAL = frozenset({"done", "failed", "cancelled"})


class SubmittedRun(RunAccepted):
    """The answer to a submission: ``created`` is false when the server returned the run
    already stored under this Idempotency-Key."""

    created: bool = Field(description="Whether this call created the run.")
    idempotency_key: str = Field(description="The key the submission was sent with.")


@dataclass(frozen=True)
class Call(Generic[T]):
    method: str
    path: str
    read: Callable[[httpx.Response], T]
    body: Any = None
    params: Mapping[str, Any] | None = None
    headers: Mapping[str, str] = field(default_factory=dict)

    def finish(self, response: httpx.Response) -> T:
        """The parsed answer, or the typed error for an error status."""
        if response.status_code >= 400:
            try:
                body: Any = response.json()
            except ValueError:
                body = {"detail": response.text}
            raise error_for(response.status_code, body, retry_after_seconds(response))
        return self.read(response)


def _reader(model: type[T]) -> Callable[[httpx.Response], T]:
    def read(response: httpx.Response) -> T:
        assert issubclass(model, BaseModel)
        return model.model_validate(response.json())
    return read


def _body(schema: type[BaseModel], fields: Mapping[str, Any]) -> Any:
    """The JSON body, validated first with the server's own request schema so that a wrong
    field fails here with the same detail the server would give."""
    given = {key: _as_dict(value) for key, value in fields.items() if value is not None}
    try:
        model = schema.model_validate(given)
    except ValidationError as exc:
        raise RequestRejected(422, [
            ErrorDetail(loc=("body", *e["loc"]), msg=e["msg"], type=e["type"])
            for e in exc.errors()
        ]) from None
    return model.model_dump(mode="json", exclude_unset=True)


def _as_dict(value: Any) -> Any:
    if isinstance(value, BaseModel):
        return value.model_dump(mode="json", exclude_unset=True)
    return value


def exceedance(**fields: Any) -> Call[ExceedanceResult]:
    return Call("POST", "/v1/exceedance", _reader(ExceedanceResult),
                body=_body(ExceedanceRequest, fields))


def risk_measures(**fields: Any) -> Call[RiskMeasuresResult]:
    return Call("POST", "/v1/risk-measures", _reader(RiskMeasuresResult),
                body=_body(RiskMeasuresRequest, fields))


def layers(**fields: Any) -> Call[LayersResult]:
    return Call("POST", "/v1/layers", _reader(LayersResult),
                body=_body(LayersRequest, fields))


def ruin(**fields: Any) -> Call[RuinResult]:
    return Call("POST", "/v1/ruin", _reader(RuinResult),
                body=_body(RuinRequest, fields))


def fit(**fields: Any) -> Call[FitResult]:
    return Call("POST", "/v1/fit", _reader(FitResult),
                body=_body(FitRequest, fields))


def batch_body(batch: RunBatchIn | Mapping[str, Any]) -> Any:
    return _body(RunBatchIn, _as_dict(batch))


def batch_key(body: Any) -> str:
    """An Idempotency-Key derived from the batch content: the same batch gives the same key,
    so a retried or accidental second submission returns the run already stored."""
    canonical = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return "batch-" + hashlib.sha256(canonical.encode()).hexdigest()[:40]


def fresh_key() -> str:
    """A new random Idempotency-Key: pass it to submit the same batch as a new run."""
    return "new-" + uuid.uuid4().hex


def submit_run(batch: RunBatchIn | Mapping[str, Any],
               idempotency_key: str | None) -> Call[SubmittedRun]:
    body = batch_body(batch)
    key = idempotency_key if idempotency_key is not None else batch_key(body)

    def read(response: httpx.Response) -> SubmittedRun:
        accepted = RunAccepted.model_validate(response.json())
        return SubmittedRun(run_id=accepted.run_id, status=accepted.status,
                            created=response.status_code == 202, idempotency_key=key)

    return Call("POST", "/v1/runs", read, body=body, headers={IDEMPOTENCY_HEADER: key})


def get_run(run_id: str) -> Call[RunResult]:
    return Call("GET", f"/v1/runs/{run_id}", _reader(RunResult))


def get_run_batch(run_id: str) -> Call[RunBatchIn]:
    return Call("GET", f"/v1/runs/{run_id}/batch", _reader(RunBatchIn))


def cancel_run(run_id: str) -> Call[RunResult]:
    return Call("DELETE", f"/v1/runs/{run_id}", _reader(RunResult))


def list_runs(status: str | None, limit: int, cursor: str | None) -> Call[RunList]:
    params: dict[str, Any] = {"limit": limit}
    if status is not None:
        params["status"] = status
    if cursor is not None:
        params["cursor"] = cursor
    return Call("GET", "/v1/runs", _reader(RunList), params=params)


def health() -> Call[dict[str, Any]]:
    def read(response: httpx.Response) -> dict[str, Any]:
        body: dict[str, Any] = response.json()
        return body
    return Call("GET", "/v1/health", read)


def progress_line(run: RunSummary) -> str:
    p = run.progress
    return (f"{run.name}: {p.done}/{p.total} done ({p.failed} failed, {p.running} running, "
            f"{p.queued} queued) {run.status}")
