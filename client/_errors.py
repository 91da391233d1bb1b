"""Errors the client raises, one hierarchy::

    ServiceError                 the server answered with an error status
    ├── RequestRejected          422: the request is invalid or a server limit is exceeded
    ├── NotAuthorized            401 / 403: missing, wrong or foreign bearer token
    ├── NotFound                 404: no such run
    ├── Conflict                 409: an Idempotency-Key reused for a different batch
    ├── Unavailable              503 still there after the retries (overload, time limit)
    └── ServerFault              any other 4xx / 5xx
    TransportFailed              no answer at all after the retries (connection refused, reset)
    RunWaitTimeout               wait_run gave up before the run finished

Server errors keep the body's ``detail`` list (``loc``, ``msg``, ``type``) as ``errors``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

__all__ = [
    "Conflict",
    "ErrorDetail",
    "NotAuthorized",
    "NotFound",
    "RequestRejected",
    "RunWaitTimeout",
    "ServerFault",
    "ServiceError",
    "TransportFailed",
    "Unavailable",
]


@dataclass(frozen=True)
class ErrorDetail:
    """One entry of the server's error ``detail`` list."""

    loc: tuple[str | int, ...]
    msg: str
    type: str

    def __str__(self) -> str:
        where = ".".join(str(part) for part in self.loc)
        return f"{where}: {self.msg} ({self.type})"


class ServiceError(Exception):
    """The server answered with an error status."""

    def __init__(self, status: int, errors: list[ErrorDetail]) -> None:
        self.status = status
        self.errors = errors
        text = "; ".join(str(e) for e in errors) or "no detail"
        super().__init__(f"HTTP {status}: {text}")


class RequestRejected(ServiceError):
    """422: the request is invalid, or the engine or a server limit refuses it."""


class NotAuthorized(ServiceError):
    """401 or 403."""


class NotFound(ServiceError):
    """404."""


class Conflict(ServiceError):
    """409."""


class Unavailable(ServiceError):
    """503 that persisted through every retry."""

    def __init__(self, status: int, errors: list[ErrorDetail], retry_after: float | None) -> None:
        super().__init__(status, errors)
        self.retry_after = retry_after


class ServerFault(ServiceError):
    """Any other error status."""


class TransportFailed(Exception):
    """No HTTP answer after every retry; ``__cause__`` holds the last transport error."""


class RunWaitTimeout(Exception):
    """The run did not finish within wait_run's timeout; ``run`` is its last seen state."""

    def __init__(self, run_id: str, timeout: float, run: Any) -> None:
        self.run_id = run_id
        self.run = run
        super().__init__(f"run {run_id} not finished after {timeout:g} s")


_BY_STATUS: dict[int, type[ServiceError]] = {
    401: NotAuthorized, 403: NotAuthorized, 404: NotFound, 409: Conflict, 422: RequestRejected,
}


def parse_detail(body: Any) -> list[ErrorDetail]:
    """The ``detail`` list of an error body; a body of another shape becomes one entry."""
    detail = body.get("detail") if isinstance(body, dict) else None
    if isinstance(detail, list):
        out = []
        for entry in detail:
            if isinstance(entry, dict):
                loc = entry.get("loc", [])
                out.append(ErrorDetail(
                    loc=tuple(loc) if isinstance(loc, list) else (str(loc),),
                    msg=str(entry.get("msg", "")), type=str(entry.get("type", "")),
                ))
        return out
    return [ErrorDetail(loc=(), msg=str(detail if detail is not None else body), type="unknown")]


def error_for(status: int, body: Any, retry_after: float | None = None) -> ServiceError:
    errors = parse_detail(body)
    if status == 503:
        return Unavailable(status, errors, retry_after)
    return _BY_STATUS.get(status, ServerFault)(status, errors)
