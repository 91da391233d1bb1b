"""Pure ASGI middleware that refuses request bodies over a size limit with 413.

Two checks, so that neither a declared nor an undeclared (chunked) large body is ever held in
memory: a Content-Length over the limit is refused before a byte is read, and the bytes of a
streamed body are counted as the application receives them. Once the count passes the limit
the application is told the client went away, whatever it answers is dropped, and the client
gets the 413 instead.
"""

from __future__ import annotations

import json

from starlette.types import ASGIApp, Message, Receive, Scope, Send


class BodyTooLarge(Exception):
    """Raised inside the application's receive() once the limit is passed."""


def _declared_length(scope: Scope) -> int | None:
    for name, value in scope.get("headers", ()):
        if name == b"content-length":
            try:
                return int(value)
            except ValueError:
                return None
    return None


class BodyLimitMiddleware:
    def __init__(self, app: ASGIApp, *, max_body_bytes: int) -> None:
        self.app = app
        self.max_body_bytes = max_body_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = _declared_length(scope)
        if declared is not None and declared > self.max_body_bytes:
            await self._refuse(send)
            return
        await self._guarded(scope, receive, send)

    async def _guarded(self, scope: Scope, receive: Receive, send: Send) -> None:
        received = 0
        exceeded = False
        response_started = False

        async def counting_receive() -> Message:
            nonlocal received, exceeded
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.max_body_bytes:
                    exceeded = True
                    raise BodyTooLarge
            return message

        async def guarded_send(message: Message) -> None:
            nonlocal response_started
            if exceeded:
                return  # the application's answer to a cut-off body is replaced by the 413
            if message["type"] == "http.response.start":
                response_started = True
            await send(message)

        try:
            await self.app(scope, counting_receive, guarded_send)
        except Exception:
            # Whatever the application made of the cut-off body (BodyTooLarge itself, or an
            # error wrapping it) is not the client's answer; anything else still propagates.
            if not exceeded:
                raise
        if exceeded and not response_started:
            await self._refuse(send)

    async def _refuse(self, send: Send) -> None:
        body = json.dumps(
            {
                "detail": [
                    {
                        "loc": ["body"],
                        "msg": f"request body is larger than {self.max_body_bytes} bytes",
                        "type": "body_too_large",
                    }
                ]
            }
        ).encode()
        await send(
            {
                "type": "http.response.start",
                "status": 413,
                "headers": [
                    (b"content-type", b"application/json"),
                    (b"content-length", str(len(body)).encode()),
                    (b"connection", b"close"),
                ],
            }
        )
        await send({"type": "http.response.body", "body": body})
