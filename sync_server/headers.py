"""Security headers (ASGI middleware): what a browser may do with the server's answers.

Every answer says ``X-Content-Type-Options: nosniff`` (a browser takes the content type as sent),
``X-Frame-Options: DENY`` (no page is shown inside another site's frame) and ``Referrer-Policy: no-referrer``
(no address of a camp page leaves with a link). The camp pages also carry ``CAMP_CSP``: nothing loads but the
server's own images and the one style sheet written in ``templates/base.html`` (allowed by its SHA-256, read
from the template when the server starts, so editing the styles needs nothing here); no script runs at all,
forms post only back to this server, and no other site may frame a page.
"""

from __future__ import annotations

import base64
import hashlib
import re
from pathlib import Path

from starlette.types import ASGIApp, Message, Receive, Scope, Send

__all__ = ["ALL_ANSWERS", "CAMP_CSP", "SecurityHeaders", "style_hashes"]

_TEMPLATES = Path(__file__).parent / "web" / "templates"


def style_hashes(html: str) -> list[str]:
    """CSP sources (``'sha256-...'``) for each ``<style>`` element of ``html``, over its exact text."""
    return [f"'sha256-{base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()}'"
            for body in re.findall(r"<style>(.*?)</style>", html, flags=re.S)]


CAMP_CSP = ("default-src 'none'; img-src 'self'; style-src " + " ".join(style_hashes(
    (_TEMPLATES / "base.html").read_text(encoding="utf-8"))) + "; script-src 'none'; form-action 'self'; "
            "frame-ancestors 'none'; base-uri 'none'")

ALL_ANSWERS: dict[str, str] = {"X-Content-Type-Options": "nosniff", "X-Frame-Options": "DENY",
                               "Referrer-Policy": "no-referrer"}


class SecurityHeaders:
    """Adds ``ALL_ANSWERS`` to every answer and ``Content-Security-Policy: CAMP_CSP`` to the camp pages'."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app
        self._all = [(k.lower().encode(), v.encode()) for k, v in ALL_ANSWERS.items()]
        self._camp = [(b"content-security-policy", CAMP_CSP.encode())]

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        extra = self._all + (self._camp if scope["path"].startswith("/camp") else [])

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                names = {k.lower() for k, _v in message.get("headers", [])}
                message = {**message, "headers": [*message.get("headers", []),
                                                   *((k, v) for k, v in extra if k not in names)]}
            await send(message)

        await self.app(scope, receive, send_with_headers)
