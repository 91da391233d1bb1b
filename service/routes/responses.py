"""OpenAPI descriptions of the error responses the routes can give (one body shape for all)."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, Field


class ErrorEntry(BaseModel):
    loc: list[str | int] = Field(description="Location of the offending field, from 'body'.")
    msg: str = Field(description="What is wrong, in words.")
    type: str = Field(description="Machine-readable kind of error.")


class ErrorBody(BaseModel):
    detail: list[ErrorEntry] = Field(description="One entry per problem found.")


# Every operation can answer this (the app adds it to each one): a bug, reported in the same
# shape as every other error, the traceback in the server log.
INTERNAL_ERROR: dict[int | str, dict[str, Any]] = {
    500: {"model": ErrorBody, "description": "A server bug (type internal_error); the "
          "traceback is in the server log, the connection stays usable."},
}

ERROR_RESPONSES: dict[int | str, dict[str, Any]] = {
    413: {"model": ErrorBody, "description": "Request body larger than the server accepts."},
    422: {
        "model": ErrorBody,
        "description": "Invalid request, a model the engine cannot handle, or a server limit "
        "exceeded (the message names the limit).",
    },
    503: {
        "model": ErrorBody,
        "description": "The server could not finish the computation (wall-time limit passed, "
        "worker lost); retry later or ask for less.",
    },
}
