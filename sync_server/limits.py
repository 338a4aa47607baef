"""Request size limits, for every route: a body over the limit is answered 413 (JSON) before it is read whole.
And no connection is reset that could be answered (``AnswerErrors``).

``BodyLimit`` is an ASGI middleware, so it sees the bytes as they arrive: a ``Content-Length`` over the limit is
refused at once, and a body sent without one is counted and cut off when it passes the limit. A body sent with
``Content-Encoding: gzip`` (a tablet's push, issue 16: camp Wi-Fi is slow) is inflated here, and the limit holds
for what it inflates to as well: inflating stops one byte past the limit (413), so a small body that would
inflate to gigabytes (a "zip bomb") costs the server at most the limit. A body that is not gzip data is answered
400, another encoding 415; the routes see the plain body and never the encoding.

``COMPRESS_ANSWERS`` is how the app compresses its answers (Starlette's ``GZipMiddleware``, sync_server/app.py)
for a client that sends ``Accept-Encoding: gzip``: a pull page of 500 versions (about 150 kB of JSON) goes out
about 13 times smaller. Level 5 of 9: level 9 saves a few per cent more for several times the CPU.

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
import zlib
from typing import Any, Awaitable, Callable

from starlette.requests import ClientDisconnect

__all__ = ["COMPRESS_ANSWERS", "AnswerErrors", "BodyLimit"]

# the keyword arguments of GZipMiddleware in app.py: answers under 1 kB are not worth a gzip header
COMPRESS_ANSWERS: dict[str, int] = {"minimum_size": 1000, "compresslevel": 5}

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
        headers = dict(scope.get("headers") or [])
        declared = headers.get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(send)
            return
        encoding = headers.get(b"content-encoding", b"identity").strip().lower()
        if encoding in (b"gzip", b"x-gzip"):
            await self._inflated(scope, receive, send)
            return
        if encoding != b"identity":
            named = encoding.decode(errors="replace")
            await _answer_json(send, 415, {"code": "UnsupportedEncoding", "message": (
                f"a request body is sent plain or with Content-Encoding: gzip, not {named}")})
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

    async def _inflated(self, scope: Scope, receive: Callable[[], Awaitable[Message]],
                        send: Callable[[Message], Awaitable[None]]) -> None:
        """Read a gzip body whole (at most ``limit`` bytes on the wire), inflate it (at most ``limit`` bytes), and
        hand the app the plain body with its own length and no encoding."""
        inflate = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS)
        parts: list[bytes] = []
        seen = plain = 0
        while True:
            message = await receive()
            if message["type"] != "http.request":
                return  # the client left
            chunk = message.get("body", b"")
            seen += len(chunk)
            if seen > self.limit:
                await self._refuse(send)
                return
            try:  # never more than one byte past the limit, however small the chunk
                out = inflate.decompress(chunk, self.limit - plain + 1)
            except zlib.error:
                out = None
            more = message.get("more_body", False)
            if out is None or inflate.unused_data:
                await self._bad_gzip(send, "is not gzip data", receive, more, seen)
                return
            plain += len(out)
            if plain > self.limit or inflate.unconsumed_tail:
                if not more or await _drain(receive, self.limit - seen):  # answered, not reset (as AnswerErrors)
                    await self._refuse(send, inflated=True)
                return
            parts.append(out)
            if not more:
                break
        if seen and not inflate.eof:  # (no body at all is an empty one)
            await self._bad_gzip(send, "ends before its gzip data does", receive, False, seen)
            return
        body = b"".join(parts)
        headers = [(k, v) for k, v in scope.get("headers") or [] if k not in (b"content-length", b"content-encoding")]
        given = False

        async def plain_body() -> Message:
            nonlocal given
            if given:
                return await receive()  # after the body: the disconnect
            given = True
            return {"type": "http.request", "body": body, "more_body": False}

        await self.app({**scope, "headers": [*headers, (b"content-length", str(len(body)).encode())]}, plain_body,
                       send)

    async def _bad_gzip(self, send: Callable[[Message], Awaitable[None]], what: str,
                        receive: Callable[[], Awaitable[Message]], more: bool, seen: int) -> None:
        if more and not await _drain(receive, self.limit - seen):
            return  # more than any body may be, or the client left: the connection closes
        await _answer_json(send, 400, {"code": "BadRequest", "message": f"the request body {what} though it is sent "
                                       "with Content-Encoding: gzip; send it gzip-compressed whole, or plain"})

    async def _refuse(self, send: Callable[[Message], Awaitable[None]], *, inflated: bool = False) -> None:
        once = " once inflated from gzip" if inflated else ""
        await _answer_json(send, 413, {"code": "BodyTooLarge", "message": f"a request body is at most {self.limit} "
                                       f"bytes{once}; send smaller batches"})


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
        except ClientDisconnect:  # the client went away mid-request (a tablet switched off): nobody to answer
            logging.getLogger("baulk.server").info("%s %s: the client left before its request was read",
                                                   scope.get("method"), scope.get("path"))
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
