"""Request size limits, for every route: a body over the limit is answered 413 (JSON) before it is read whole.
And no connection is reset that could be answered (``AnswerErrors``).

``BodyLimit`` is an ASGI middleware, so it sees the bytes as they arrive: a ``Content-Length`` over the limit is
refused at once, and a body sent without one is counted and cut off when it passes the limit.

``AnswerErrors`` is the outermost of the app's own middleware: a request that fails with an unexpected error
before its answer started (a store that cannot give a connection under load, a bug) is answered 500 in JSON,
its body read to the end first (up to the body limit) and the connection kept. Left to Starlette and uvicorn,
the 500 is sent and the socket closed with the unread body in it, and the kernel then resets the connection
(RST): a tablet pushing a batch sees ``Connection reset by peer`` rather than the answer
(tests/sync_server/test_connection_resets.py).
"""

from __future__ import annotations

import json
import logging
from typing import Any, Awaitable, Callable

__all__ = ["AnswerErrors", "BodyLimit"]

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
        await _answer_json(send, 413, {"code": "BodyTooLarge", "message": f"a request body is at most {self.limit} "
                                       "bytes; send smaller batches"})


async def _answer_json(send: Callable[[Message], Awaitable[None]], status: int, payload: dict[str, str]) -> None:
    body = json.dumps(payload).encode()
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode())]})
    await send({"type": "http.response.body", "body": body})


class AnswerErrors:
    """Answer an unexpected error as JSON 500 after reading the rest of the request body (at most ``limit``
    bytes; more than that and the connection is left to close), so the connection is answered, not reset."""

    def __init__(self, app: Callable[..., Awaitable[None]], *, limit: int) -> None:
        self.app, self.limit = app, limit

    async def __call__(self, scope: Scope, receive: Callable[[], Awaitable[Message]],
                       send: Callable[[Message], Awaitable[None]]) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = False
        body_done = False

        async def reading() -> Message:
            nonlocal body_done
            message = await receive()
            if message["type"] != "http.request" or not message.get("more_body", False):
                body_done = True
            return message

        async def watch(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, reading, watch)
        except Exception:
            if started:
                raise  # half an answer is out: only closing the connection tells the client
            logging.getLogger("baulk.server").exception("%s %s failed", scope.get("method"), scope.get("path"))
            if not body_done and not await _drain(receive, self.limit):
                raise  # the body is larger than any request may be: let the connection close
            await _answer_json(send, 500, {"code": "ServerError", "message": "the camp server hit an unexpected "
                                           "problem with this request (its log has the details); try again"})


async def _drain(receive: Callable[[], Awaitable[Message]], limit: int) -> bool:
    """Read what is left of a request body; False when more than ``limit`` bytes came (or the client left)."""
    seen = 0
    while True:
        message = await receive()
        if message["type"] != "http.request":
            return False
        seen += len(message.get("body", b""))
        if seen > limit:
            return False
        if not message.get("more_body", False):
            return True
