"""Every error the service answers with is built here.

Domain errors from the core (``TailgaugeError``: ParameterError, MethodError, LimitError) and
request-validation errors both become 422 responses whose ``detail`` is a list of
``{"loc": [...], "msg": ..., "type": ...}`` entries, the shape FastAPI uses for validation
errors. The caller's input is never echoed back: it may be large, and it may hold the NaN or
Infinity that made it invalid (which JSON cannot carry).
"""

from __future__ import annotations

import re
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exception_handlers import http_exception_handler
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from core.errors import LimitError, MethodError, ParameterError, TailgaugeError

_ERROR_TYPES: dict[type[TailgaugeError], str] = {
    ParameterError: "parameter_error",
    MethodError: "method_error",
    LimitError: "limit_exceeded",
}
_PATH_TOKEN = re.compile(r"([^.\[\]]+)|\[(\d+)\]")


class ComputationUnavailable(Exception):
    """The computation could not be finished by the server (timeout, lost worker): 503."""

    def __init__(self, loc: list[str | int], message: str, kind: str) -> None:
        super().__init__(message)
        self.loc = loc
        self.message = message
        self.kind = kind


def detail_entry(loc: list[str | int], msg: str, type_: str) -> dict[str, Any]:
    return {"loc": loc, "msg": msg, "type": type_}


def parameter_loc(parameter: str) -> list[str | int]:
    """'portfolio.lines[0].severity.sigma' -> body, portfolio, lines, 0, severity, sigma."""
    loc: list[str | int] = ["body"]
    for name, index in _PATH_TOKEN.findall(parameter):
        # List positions come as "[3]" or as a bare ".3" segment.
        position = index or (name if name.isdigit() else "")
        loc.append(int(position) if position else name)
    return loc


def error_type(exc: TailgaugeError) -> str:
    for cls in type(exc).__mro__:
        if cls in _ERROR_TYPES:
            return _ERROR_TYPES[cls]
    return "engine_error"


def _plain_loc(loc: Any) -> list[str | int]:
    # loc entries are field names and list indices; anything else is shown as text.
    return [part if isinstance(part, str | int) else str(part) for part in loc]


def validation_entry(error: dict[str, Any]) -> dict[str, Any]:
    msg = str(error.get("msg", ""))
    ctx = error.get("ctx") or {}
    if error.get("type") == "json_invalid" and "error" in ctx:
        msg = f"{msg}: {ctx['error']}"
    return detail_entry(_plain_loc(error.get("loc", ())), msg, str(error.get("type", "")))


async def _tailgauge_error(_: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, TailgaugeError)
    entry = detail_entry(parameter_loc(exc.parameter), exc.message, error_type(exc))
    return JSONResponse(status_code=422, content={"detail": [entry]})


async def _validation_error(_: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, RequestValidationError)
    detail = [validation_entry(e) for e in exc.errors()]
    return JSONResponse(status_code=422, content={"detail": detail})


async def _http_error(request: Request, exc: Exception) -> Any:
    assert isinstance(exc, StarletteHTTPException)
    # FastAPI turns a RecursionError from the JSON parser (deeply nested input) into a bare
    # 400; give it the same shape as every other malformed-JSON error.
    if exc.status_code == 400 and isinstance(exc.__cause__, RecursionError):
        entry = detail_entry(["body"], "JSON decode error: nested too deeply", "json_invalid")
        return JSONResponse(status_code=422, content={"detail": [entry]})
    return await http_exception_handler(request, exc)


async def _unavailable(_: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, ComputationUnavailable)
    entry = detail_entry(exc.loc, exc.message, exc.kind)
    return JSONResponse(status_code=503, content={"detail": [entry]}, headers={"Retry-After": "5"})


async def _internal_error(_: Request, exc: Exception) -> JSONResponse:
    # Same shape as every other error; the traceback goes to the server log, not the client.
    entry = detail_entry([], f"internal error ({type(exc).__name__})", "internal_error")
    return JSONResponse(status_code=500, content={"detail": [entry]})


def install_error_handlers(app: FastAPI) -> None:
    app.add_exception_handler(TailgaugeError, _tailgauge_error)
    app.add_exception_handler(RequestValidationError, _validation_error)
    app.add_exception_handler(StarletteHTTPException, _http_error)
    app.add_exception_handler(ComputationUnavailable, _unavailable)
    app.add_exception_handler(Exception, _internal_error)

