"""Request size limits, for every route: a body over the limit is answered 413 (JSON) before it is read whole.

An ASGI middleware, so it sees the bytes as they arrive: a ``Content-Length`` over the limit is refused at once,
and a body sent without one is counted and cut off when it passes the limit.
"""

from __future__ import annotations

import json
from typing import Any, Awaitable, Callable

__all__ = ["BodyLimit"]

Scope = dict[str, Any]
Message = dict[str, Any]


class _TooLarge(Exception):
    pass


class BodyLimit:
    def __init__(self, app: Callable[..., Awaitable[None]], *, limit: int) -> None:
        self.app, self.limit = app, limit

    async def __call__(self, scope: Scope, receive: Callable[[], Awaitable[Message]],
                       send: Callable[[Message], Awaitable[None]]) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers") or []).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(send)
            return
        seen = 0
        started = False

        async def counted() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise _TooLarge
            return message

        async def watch(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, counted, watch)
        except _TooLarge:
            if not started:
                await self._refuse(send)

    async def _refuse(self, send: Callable[[Message], Awaitable[None]]) -> None:
        body = json.dumps({"code": "BodyTooLarge", "message": f"a request body is at most {self.limit} bytes; "
                           "send smaller batches"}).encode()
        await send({"type": "http.response.start", "status": 413,
                    "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode())]})
        await send({"type": "http.response.body", "body": body})
