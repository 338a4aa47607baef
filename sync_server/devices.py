"""Devices on the camp server: one-time enrolment codes, the exchange for a token, listing and revoking.

A data manager makes a code for a new device (``baulk device add``): the device is registered at once with its
label and role but no token, and the code (12 characters, shown as text and as a QR code) is good once, for a
short time. The tablet sends the code to ``POST /v1/enrol`` and gets its device id and a long random token,
shown once; the server keeps only SHA-256 digests of both. Revoking a device refuses its token from the next
request on.

The QR code carries a ``baulk-enrol:`` line of our own: the server address, the code and, when the server
serves HTTPS, the SHA-256 fingerprint of its certificate so the tablet can pin it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import secrets
import threading
import time
from collections import deque
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs, quote, urlencode, urlsplit

import sqlalchemy as sa

from schema.errors import EnrolmentRefused, RecordNotFound
from schema.records import Device, DevicePublic
from schema.records.device import check_label

from .store import ServerStore, hash_token
from .tables import enrolment_code

__all__ = ["CODE_TTL", "EnrolRateLimit", "code_from_text", "code_qr", "enrol_line", "exchange_code", "list_devices",
           "make_code", "normalise_code", "public", "revoke_device"]

CODE_TTL = dt.timedelta(minutes=15)
_ALPHABET = "0123456789ABCDEFGHJKMNPQRSTVWXYZ"  # Crockford base 32: no I, L, O or U to misread in the sun
_READS_AS = {"I": "1", "L": "1", "O": "0", "U": "V"}


def normalise_code(code: str) -> str:
    """Upper case, dashes and spaces dropped, look-alike letters read as the digits they resemble."""
    return "".join(_READS_AS.get(c, c) for c in code.upper() if c not in "- ")


def _hash_code(code: str) -> str:
    return hashlib.sha256(normalise_code(code).encode()).hexdigest()


def make_code(store: ServerStore, *, label: str, role: str, by: str = "console",
              now: dt.datetime | None = None, ttl: dt.timedelta = CODE_TTL) -> tuple[Device, str, dt.datetime]:
    """Register a device (no token yet) and make its one-time code; returns (device, code, expires_at). A label
    that is not readable text is refused (``check_label``: ``RecordInvalid``)."""
    check_label(label)
    now = now or dt.datetime.now(dt.timezone.utc)
    raw = "".join(secrets.choice(_ALPHABET) for _ in range(12))
    code = f"{raw[:4]}-{raw[4:8]}-{raw[8:]}"
    with store.atomic() as conn:
        device = store.add(Device(label=label, role=role))  # type: ignore[arg-type]
        conn.execute(enrolment_code.insert().values(code_hash=_hash_code(code), device_id=device.id, created_at=now,
                                                    expires_at=now + ttl, used_at=None, created_by=by))
    return device, code, now + ttl


def exchange_code(store: ServerStore, code: str, *, now: dt.datetime | None = None,
                  roles: tuple[str, ...] | None = None) -> dict[str, Any]:
    """Swap a code for the device's id and a new token (shown once). Recorders get their first number block.

    With ``roles`` (the camp pages: manager and analyst), a code made for a device of another role is refused
    and stays good for the device it was made for."""
    now = now or dt.datetime.now(dt.timezone.utc)
    token = secrets.token_urlsafe(32)
    with store.atomic() as conn:
        row = conn.execute(sa.select(enrolment_code).where(enrolment_code.c.code_hash == _hash_code(code))).first()
        if row is None:
            raise EnrolmentRefused("this enrolment code is not known here; check it, or ask the data manager for a new one")
        if row.used_at is not None:
            raise EnrolmentRefused("this enrolment code was used already; ask the data manager for a new one")
        if row.expires_at <= now:
            raise EnrolmentRefused(f"this enrolment code expired at {row.expires_at:%H:%M} UTC; ask the data manager "
                                   "for a new one")
        device = store.get(Device, row.device_id)
        if device.revoked_at is not None:
            raise EnrolmentRefused(f"device {device.label} was revoked; ask the data manager for a new code")
        if roles is not None and device.role not in roles:
            raise EnrolmentRefused(_wrong_role(device, row.expires_at, roles))
        conn.execute(enrolment_code.update().where(enrolment_code.c.code_hash == row.code_hash).values(used_at=now))
        device = store.put(device.model_copy(update={"token_hash": hash_token(token), "enrolled_at": now}))
        blocks = [store.issue_number_block(device_id=device.id, now=now)] if device.role == "recorder" else []
    return {"device_id": str(device.id), "label": device.label, "role": device.role, "token": token,
            "number_blocks": [{"first": b.first, "last": b.last} for b in blocks]}


def _wrong_role(device: Device, expires: dt.datetime, roles: tuple[str, ...]) -> str:
    wanted = " or ".join(f"{'an' if r[:1] in 'aeiou' else 'a'} {r}'s" for r in roles)
    if device.role == "recorder":
        return (f"this code enrols {device.label}, a recorder: recorder codes are for tablets, so type or scan it on "
                f"that tablet's Camp screen (it is not used up and stays good until {expires:%H:%M} UTC); "
                f"sign in here with {wanted} code or token")
    return (f"this code enrols {device.label}, {'an' if device.role[:1] in 'aeiou' else 'a'} {device.role}, and "
            f"cannot be used here (it is not used up); sign in here with {wanted} code or token")


def code_from_text(text: str) -> str:
    """The code from what was typed or pasted: a bare code, or a whole ``baulk-enrol:`` line (its ``code``)."""
    text = text.strip()
    if not text.startswith("baulk-enrol:"):
        return text
    found = parse_qs(urlsplit(text.removeprefix("baulk-enrol:")).query).get("code")
    if not found or not found[0].strip():
        raise EnrolmentRefused("this baulk-enrol: line holds no code; paste the whole line again or type the code")
    return found[0].strip()


def public(device: Device) -> DevicePublic:
    """A device as a manager sees it: never its token hash."""
    return DevicePublic.model_validate(device.model_dump(exclude={"token_hash"}))


def list_devices(store: ServerStore) -> list[DevicePublic]:
    return [public(d) for d in store.list(Device, order_by="label")]


def revoke_device(store: ServerStore, which: str, *, now: dt.datetime | None = None) -> Device:
    """Revoke a device by label or id; its token is refused from the next request on."""
    now = now or dt.datetime.now(dt.timezone.utc)
    found = [d for d in store.list(Device) if d.label == which or str(d.id) == which]
    if not found:
        raise RecordNotFound(f"no device is called {which!r}; `baulk device list` shows them")
    device = found[0]
    if device.revoked_at is not None:
        return device
    return store.put(device.model_copy(update={"revoked_at": now}))


def enrol_line(server_url: str, code: str, *, fingerprint: str | None = None) -> str:
    """What the QR code holds: ``baulk-enrol:?server=...&code=...[&sha256=...]``."""
    params = {"server": server_url, "code": code}
    if fingerprint:
        params["sha256"] = fingerprint
    return "baulk-enrol:?" + urlencode(params, quote_via=quote)


def code_qr(line: str, *, png: Path | None = None) -> str:
    """The QR code as text for a terminal (and, with ``png``, written as a PNG image too)."""
    import io

    import segno

    qr = segno.make(line, error="m")
    if png is not None:
        png.parent.mkdir(parents=True, exist_ok=True)
        qr.save(str(png), scale=8, border=4)
    buf = io.StringIO()
    qr.terminal(out=buf, compact=True, border=2)
    return buf.getvalue()


class EnrolRateLimit:
    """At most ``limit`` enrolment attempts per client address in ``window_s`` seconds (guessing codes)."""

    def __init__(self, limit: int = 10, window_s: float = 60.0) -> None:
        self.limit, self.window_s = limit, window_s
        self._seen: dict[str, deque[float]] = {}
        self._lock = threading.Lock()

    def allow(self, who: str) -> bool:
        now = time.monotonic()
        with self._lock:
            q = self._seen.setdefault(who, deque())
            while q and now - q[0] > self.window_s:
                q.popleft()
            if len(q) >= self.limit:
                return False
            q.append(now)
            return True
