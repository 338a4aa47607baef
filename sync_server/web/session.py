"""Signing in to the camp pages: a manager's or analyst's device token, exchanged once for a session cookie.

The cookie holds the device id, an expiry, the device's sign-in generation and a CSRF secret, signed with
HMAC-SHA256 under a key the server makes once and keeps in its database; it is HttpOnly, SameSite=Strict, and
Secure on HTTPS. Every page request looks the device up again, so revoking it signs it out at once. Signing out
moves the device's generation on (kept in the database), which ends every session of that device on the server:
a copy of the old cookie opens nothing. Every form carries the session's CSRF token; a POST without the right one
is refused (403) and changes nothing.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import secrets
import time
import uuid
from dataclasses import dataclass
from typing import Any

from fastapi import HTTPException, Request

from schema.records import Device

__all__ = ["COOKIE", "PAGE_ROLES", "Session", "check_csrf", "current", "end_sessions", "make_cookie"]

COOKIE = "baulk_camp"
LIFETIME_S = 12 * 3600  # one camp evening
PAGE_ROLES = ("manager", "analyst")


@dataclass(frozen=True)
class Session:
    device: Device
    csrf: str


def _key(request: Request) -> bytes:
    key = getattr(request.app.state, "session_key", None)
    if key is None:
        from schema.sync.replica import state_get, state_set

        store = request.app.state.store
        with store.atomic() as conn:
            value = state_get(conn, "web_session_key")
            if value is None:
                value = secrets.token_hex(32)
                state_set(conn, "web_session_key", value)
        key = bytes.fromhex(value)
        request.app.state.session_key = key
    return key


def _sign(key: bytes, body: bytes) -> str:
    return base64.urlsafe_b64encode(hmac.new(key, body, hashlib.sha256).digest()).decode().rstrip("=")


def _generation_key(device_id: uuid.UUID) -> str:
    return f"session:{device_id.hex}"  # sync_state keys are at most 40 characters


def _generation(request: Request, device_id: uuid.UUID) -> int:
    from schema.sync.replica import state_get

    with request.app.state.store.read() as conn:
        return int(state_get(conn, _generation_key(device_id), "0") or 0)


def end_sessions(request: Request, device: Device) -> None:
    """Sign ``device`` out everywhere: every cookie made for it so far opens nothing from now on."""
    from schema.sync.replica import state_get, state_set

    with request.app.state.store.atomic() as conn:
        key = _generation_key(device.id)
        state_set(conn, key, int(state_get(conn, key, "0") or 0) + 1)


def make_cookie(request: Request, device: Device) -> str:
    payload = {"d": str(device.id), "x": int(time.time()) + LIFETIME_S, "g": _generation(request, device.id),
               "c": secrets.token_urlsafe(24)}
    body = base64.urlsafe_b64encode(json.dumps(payload, separators=(",", ":")).encode()).decode().rstrip("=")
    return f"{body}.{_sign(_key(request), body.encode())}"


def _read(request: Request) -> dict[str, Any] | None:
    raw = request.cookies.get(COOKIE, "")
    body, _, sig = raw.partition(".")
    if not body or not sig or not hmac.compare_digest(sig, _sign(_key(request), body.encode())):
        return None
    try:
        payload = json.loads(base64.urlsafe_b64decode(body + "=" * (-len(body) % 4)))
    except ValueError:
        return None
    return payload if isinstance(payload, dict) and payload.get("x", 0) > time.time() else None


def current(request: Request) -> Session | None:
    """The signed-in session, or None (no cookie, a forged or expired one, one its device signed out of, a
    revoked device, a wrong role)."""
    payload = _read(request)
    if payload is None:
        return None
    found = request.app.state.store.list(Device, id=uuid.UUID(payload["d"]))
    if not found or found[0].revoked_at is not None or found[0].role not in PAGE_ROLES:
        return None
    if payload.get("g", 0) != _generation(request, found[0].id):
        return None
    return Session(found[0], str(payload["c"]))


def check_csrf(session: Session, token: str | None) -> None:
    if not token or not hmac.compare_digest(token, session.csrf):
        raise HTTPException(403, detail="this form is out of date or did not come from these pages; reload the page and try again")
