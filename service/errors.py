"""Every error the service answers with is built here, for HTTP and for batch runs alike.

``problem(exc)`` is the one mapping from an exception to an answer: a status code and a
``detail`` list of ``{"loc": [...], "msg": ..., "type": ...}`` entries (the shape FastAPI uses
for validation errors), the same for the HTTP handlers and for a failed batch item.

| exception | status | ``type`` |
|---|---|---|
| core ``TailgaugeError`` (ParameterError, MethodError, LimitError) | 422 | parameter_error, ... |
| request validation (FastAPI or pydantic) | 422 | pydantic's (greater_than, ...) |
| a body that cannot be parsed (bad UTF-8, an over-long integer, nesting) | 422 | json_invalid |
| ``ComputationUnavailable`` | 503 | time_limit, worker_lost, overloaded |
| Starlette's 404 / 405 | 404 / 405 | not_found, method_not_allowed |
| anything else (a bug) | 500 | internal_error |

Locations are tuples from the core (``exc.loc``) prefixed with ``"body"``; nothing is parsed
back from text. The caller's input is never echoed: it may be large, and it may hold the NaN
or Infinity that made it invalid (which JSON cannot carry).
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import ValidationError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from core.errors import LimitError, Loc, MethodError, ParameterError, TailgaugeError
from service.body_limit import BodyTooLarge

log = logging.getLogger("tailgauge.errors")

_ERROR_TYPES: dict[type[TailgaugeError], str] = {
    ParameterError: "parameter_error",
    MethodError: "method_error",
    LimitError: "limit_exceeded",
}
_STATUS_TYPES = {404: "not_found", 405: "method_not_allowed", 409: "conflict"}
RETRY_AFTER_S = 5


class ComputationUnavailable(Exception):
    """The computation could not be finished by the server (timeout, lost worker, the queue
    ahead too long to finish in time): 503, with Retry-After `retry_after_s` when known."""

    def __init__(self, loc: Loc, message: str, kind: str,
                 retry_after_s: int | None = None) -> None:
        super().__init__(message)
        self.loc = loc
        self.message = message
        self.kind = kind
        self.retry_after_s = retry_after_s


@dataclass(frozen=True)
class Problem:
    """An error answer: status, detail entries and extra headers."""

    status: int
    detail: list[dict[str, Any]]
    headers: dict[str, str] = field(default_factory=dict)

    @property
    def kind(self) -> str:
        return str(self.detail[0]["type"]) if self.detail else ""


def detail_entry(loc: Sequence[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"loc": list(loc), "msg": msg, "type": type_}


def error_type(exc: TailgaugeError) -> str:
    for cls in type(exc).__mro__:
        if cls in _ERROR_TYPES:
            return _ERROR_TYPES[cls]
    return "engine_error"


def _plain_loc(loc: Iterable[Any]) -> list[str | int]:
    # loc entries are field names and list indices; anything else is shown as text.
    return [part if isinstance(part, str | int) else str(part) for part in loc]


def validation_entry(error: Mapping[str, Any], prefix: Loc = ()) -> dict[str, Any]:
    """One pydantic error as a detail entry, without its input and context."""
    msg = str(error.get("msg", ""))
    ctx = error.get("ctx") or {}
    if error.get("type") == "json_invalid" and "error" in ctx:
        msg = f"{msg}: {ctx['error']}"
    loc = [*prefix, *_plain_loc(error.get("loc", ()))]
    return detail_entry(loc, msg, str(error.get("type", "")))


def _unparsable(exc: BaseException) -> str | None:
    """Why a body could not be read as JSON, when that is what ``exc`` is about."""
    cause = exc.__cause__ if isinstance(exc, StarletteHTTPException) else exc
    if isinstance(cause, RecursionError):
        return "nested too deeply"
    if isinstance(cause, UnicodeDecodeError):
        return "the body is not valid UTF-8"
    if isinstance(cause, ValueError) and "digits" in str(cause):
        # CPython refuses integer literals over sys.get_int_max_str_digits() digits.
        return "an integer literal has too many digits"
    return None


def problem(exc: BaseException) -> Problem:
    """The answer to ``exc``, wherever it was raised (endpoint or batch item)."""
    if isinstance(exc, TailgaugeError):
        return Problem(422, [detail_entry(("body", *exc.loc), exc.message, error_type(exc))])
    if isinstance(exc, RequestValidationError):
        return Problem(422, [validation_entry(e) for e in exc.errors()])
    if isinstance(exc, ValidationError):  # a batch item's request, validated when it runs
        return Problem(422, [validation_entry(e, ("body",)) for e in exc.errors()])
    if isinstance(exc, ComputationUnavailable):
        return Problem(503, [detail_entry(exc.loc, exc.message, exc.kind)],
                       {"Retry-After": str(exc.retry_after_s or RETRY_AFTER_S)})
    why = _unparsable(exc)
    if why is not None and (not isinstance(exc, StarletteHTTPException) or exc.status_code == 400):
        return Problem(422, [detail_entry(["body"], f"JSON decode error: {why}", "json_invalid")])
    if isinstance(exc, StarletteHTTPException):
        if isinstance(exc.detail, list):  # already entries (404 of a run, 409)
            return Problem(exc.status_code, exc.detail, dict(exc.headers or {}))
        kind = _STATUS_TYPES.get(exc.status_code, "http_error")
        loc = ["request", "method"] if exc.status_code == 405 else ["path"]
        return Problem(exc.status_code, [detail_entry(loc, str(exc.detail), kind)],
                       dict(exc.headers or {}))
    return Problem(500, [detail_entry([], f"internal error ({type(exc).__name__})",
                                      "internal_error")])


def response(p: Problem) -> JSONResponse:
    return JSONResponse(status_code=p.status, content={"detail": p.detail},
                        headers=p.headers or None)


async def _handle(_: Request, exc: Exception) -> JSONResponse:
    return response(problem(exc))


class InternalErrorMiddleware:
    """Answers an unexpected exception with the 500 entry, and does not raise it further.

    Starlette's own last-resort handler sends the 500 and then re-raises, and the server then
    closes the connection (uvicorn cannot know the exchange ended cleanly): the client's next
    request on that keep-alive connection was lost. Here the traceback goes to the log and
    the connection stays usable.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = False

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, receive, tracking_send)
        except BodyTooLarge:
            raise  # the body limit answers 413 itself
        except Exception as exc:
            log.exception("unhandled error answering %s %s", scope.get("method"),
                          scope.get("path"))
            if started:  # half an answer cannot be mended: let the server close
                raise
            await response(problem(exc))(scope, receive, send)


def install_error_handlers(app: FastAPI) -> None:
    for kind in (TailgaugeError, RequestValidationError, StarletteHTTPException,
                 ComputationUnavailable):
        app.add_exception_handler(kind, _handle)
