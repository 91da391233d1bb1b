"""OpenAPI descriptions of the error responses every computing route can give."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, Field


class ErrorEntry(BaseModel):
    loc: list[str | int] = Field(description="Location of the offending field, from 'body'.")
    msg: str = Field(description="What is wrong, in words.")
    type: str = Field(description="Machine-readable kind of error.")


class ErrorBody(BaseModel):
    detail: list[ErrorEntry] = Field(description="One entry per problem found.")


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
