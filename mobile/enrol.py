"""Enrolling this tablet with a camp server: the one-time code in, the device id and token kept.

The code comes typed or scanned from the data manager's QR code (a ``baulk-enrol:?server=...&code=...`` line;
``parse_enrol_line`` reads it). When the line carries the server certificate's SHA-256 fingerprint, the caller
builds its HTTP client to accept exactly that certificate (the app does; tests use plain loopback HTTP).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import ssl
import uuid
from typing import Any
from urllib.parse import parse_qs, urlsplit

import httpx

from schema.errors import EnrolmentRefused, SyncError
from schema.records import Device

from .store import TabletStore

__all__ = ["check_address", "check_can_enrol", "enrol", "parse_enrol_line", "pinned_context"]


def check_address(text: str) -> str:
    """The camp server's address as typed, checked on the tablet (nothing is sent): ``http(s)://host[:port]``."""
    address = (text or "").strip().rstrip("/")
    parts = urlsplit(address)
    try:
        port_ok = parts.port is None or 0 < parts.port < 65536
    except ValueError:
        port_ok = False
    if parts.scheme not in ("http", "https") or not parts.hostname or not port_ok or parts.query or parts.fragment:
        raise EnrolmentRefused(f"{address!r} is not a camp server address; type it as the data manager shows it, "
                               "e.g. https://192.168.8.10:8765")
    return address


def check_can_enrol(store: TabletStore) -> None:
    """Refuse, before a one-time code is spent, to enrol a tablet that already is a device (a new camp address
    needs no new code: it is a setting)."""
    device, token = store.device_id(), store.token()
    if device is not None and token is not None:
        found = store.list(Device, id=device)
        label = found[0].label if found else "a device of this camp"
        raise EnrolmentRefused(f"this tablet is already enrolled as {label}; the code was not used. To follow a new "
                               "camp address, type it and tap Save address")


def parse_enrol_line(line: str) -> dict[str, str]:
    """``{"server", "code"[, "sha256"]}`` from the QR code's text; a bare code gives just ``{"code"}``."""
    line = line.strip()
    if not line.startswith("baulk-enrol:"):
        return {"code": line}
    query = parse_qs(urlsplit(line.removeprefix("baulk-enrol:")).query)
    out = {k: v[0] for k, v in query.items() if v}
    if "code" not in out:
        raise EnrolmentRefused("the scanned enrolment code holds no code; scan it again or type the code")
    return out


def pinned_context(server_url: str, sha256: str, *, timeout_s: float = 10.0) -> ssl.SSLContext:
    """A TLS context that trusts exactly the certificate whose SHA-256 fingerprint the enrolment code carried.

    The server's certificate is fetched once (no secret is sent), its fingerprint compared; the context then
    accepts that certificate alone on every later connection (a partial chain: the leaf is the trust anchor),
    so a stranger's certificate on the camp Wi-Fi is refused before the code or the token leaves the tablet.
    """
    parts = urlsplit(server_url)
    if parts.scheme != "https" or not parts.hostname:
        raise EnrolmentRefused(f"{server_url} is not an https address; a pinned certificate needs one")
    try:
        pem = ssl.get_server_certificate((parts.hostname, parts.port or 443), timeout=timeout_s)
    except OSError as exc:
        raise SyncError(f"cannot reach {server_url} to check its certificate ({exc}); check the Wi-Fi") from None
    der = ssl.PEM_cert_to_DER_cert(pem)
    seen = ":".join(f"{b:02x}" for b in hashlib.sha256(der).digest())
    if seen != sha256.lower():
        raise EnrolmentRefused(f"the server at {server_url} shows a certificate that is not the camp server's "
                               f"(fingerprint {seen[:23]}...); do not enrol here, tell the data manager")
    context = ssl.create_default_context(cadata=pem)
    context.verify_flags |= ssl.VERIFY_X509_PARTIAL_CHAIN
    return context


def enrol(store: TabletStore, http: httpx.Client, code: str) -> Device:
    """Exchange the code; this tablet becomes the device it names (number blocks arrive with the first sync).
    A tablet that is already enrolled is refused before the code leaves it."""
    check_can_enrol(store)
    try:
        r = http.post("/v1/enrol", json={"code": code.strip()})
    except httpx.HTTPError as exc:
        raise SyncError(f"cannot reach the camp server to enrol ({type(exc).__name__}); check the Wi-Fi and the "
                        "server address, then try again") from None
    body: dict[str, Any] = r.json() if r.headers.get("content-type", "").startswith("application/json") else {}
    if r.status_code == 429:
        raise EnrolmentRefused("the server refused more enrolment attempts for a minute; wait, then try again")
    if r.status_code != 200:
        raise EnrolmentRefused(body.get("message") or body.get("detail") or f"the server refused the code ({r.status_code})")
    device = Device(id=uuid.UUID(body["device_id"]), label=body["label"], role=body["role"],
                    enrolled_at=dt.datetime.now(dt.timezone.utc))
    store.set_identity(device=device)
    store.set_token(body["token"])
    return device
