"""Bundles: a tablet's unacknowledged batches in one file, carried by USB when there is no Wi-Fi.

A bundle is a zip holding ``manifest.json`` and one ``batches/NNNNNN.json`` per batch. The manifest names the
format and its version, the device, and each batch's number, version count and content hash (the same hash a
push carries); it is sealed with an HMAC-SHA256 keyed by the SHA-256 of the device's token, which the server
keeps, so only the enrolled device can make a bundle the server accepts. ``read_bundle`` checks everything
(zip CRCs, format, seal, every batch hash and device) before returning anything; an invalid bundle raises
``BundleInvalid`` with the reason.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import json
import os
import uuid
import zipfile
from pathlib import Path
from typing import Any, Callable

from pydantic import ValidationError

from ..errors import BundleInvalid
from .versions import Version, batch_hash

__all__ = ["BUNDLE_FORMAT", "BUNDLE_VERSION", "open_checked_zip", "read_bundle", "write_bundle"]

BUNDLE_FORMAT = "baulk-bundle"
BUNDLE_VERSION = 1


def _seal(manifest: dict[str, Any], token_hash: str) -> str:
    body = json.dumps({k: v for k, v in manifest.items() if k != "seal"}, sort_keys=True, separators=(",", ":"))
    return hmac.new(token_hash.encode(), body.encode(), hashlib.sha256).hexdigest()


def write_bundle(path: Path, *, device: uuid.UUID, label: str, token: str,
                 batches: list[tuple[int, list[Version]]]) -> dict[str, Any]:
    """Write the bundle atomically (a temporary file renamed into place); returns its manifest."""
    path = Path(path)
    manifest: dict[str, Any] = {
        "format": BUNDLE_FORMAT, "format_version": BUNDLE_VERSION, "device": str(device), "device_label": label,
        "created_at": dt.datetime.now(dt.timezone.utc).isoformat(),
        "batches": [{"batch": n, "versions": len(vs), "hash": batch_hash(vs), "file": f"batches/{n:06d}.json"}
                    for n, vs in batches],
    }
    manifest["seal"] = _seal(manifest, hashlib.sha256(token.encode()).hexdigest())
    tmp = path.with_name(path.name + ".part")
    with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as z:
        for (n, vs), entry in zip(batches, manifest["batches"]):
            z.writestr(entry["file"], json.dumps([v.model_dump(mode="json") for v in vs]))
        z.writestr("manifest.json", json.dumps(manifest, indent=2))
    with open(tmp, "rb") as fh:
        os.fsync(fh.fileno())
    tmp.replace(path)
    return manifest


def open_checked_zip(path: Path, *, what: str, again: str) -> tuple[zipfile.ZipFile, dict[str, Any]]:
    """Open a Baulk zip (bundle, season archive), check every entry's checksum and read its manifest;
    ``BundleInvalid`` says which, and ``again`` (e.g. "copy it from the tablet again") says what to do."""
    path = Path(path)
    try:
        z = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError) as exc:
        raise BundleInvalid(f"{path.name} is not a readable {what} ({exc}); {again}") from None
    try:
        bad = z.testzip()
        if bad is not None:
            raise BundleInvalid(f"{path.name} is damaged (entry {bad} fails its checksum); {again}")
        try:
            manifest = json.loads(z.read("manifest.json"))
        except (KeyError, ValueError):
            raise BundleInvalid(f"{path.name} has no readable manifest; it is not a Baulk {what} or it was cut short") from None
    except BaseException:
        z.close()
        raise
    return z, manifest


def read_bundle(path: Path, token_hash_of: Callable[[uuid.UUID], str | None]) -> tuple[dict[str, Any], list[tuple[int, list[Version]]]]:
    """Check the whole bundle and return its manifest and batches; ``BundleInvalid`` names what is wrong."""
    path = Path(path)
    z, manifest = open_checked_zip(path, what="bundle", again="copy it from the tablet again")
    with z:
        if manifest.get("format") != BUNDLE_FORMAT:
            raise BundleInvalid(f"{path.name} is not a Baulk bundle (format {manifest.get('format')!r})")
        if manifest.get("format_version") != BUNDLE_VERSION:
            raise BundleInvalid(f"{path.name} has bundle format {manifest.get('format_version')}; this server reads "
                                f"format {BUNDLE_VERSION}: update Baulk on the server")
        try:
            device = uuid.UUID(manifest["device"])
        except (KeyError, ValueError):
            raise BundleInvalid(f"{path.name} names no valid device") from None
        token_hash = token_hash_of(device)
        if token_hash is None:
            raise BundleInvalid(f"{path.name} comes from device {manifest.get('device_label', device)}, which is not "
                                "enrolled here (or was revoked); enrol it, then import again")
        if not hmac.compare_digest(str(manifest.get("seal", "")), _seal(manifest, token_hash)):
            raise BundleInvalid(f"{path.name} fails its seal: it was changed after the tablet wrote it, or made by "
                                "another device; nothing was imported")
        batches = []
        for entry in manifest.get("batches", []):
            try:
                raw = json.loads(z.read(entry["file"]))
                versions = [Version.model_validate(v, strict=False) for v in raw]
            except (KeyError, ValueError, ValidationError) as exc:
                raise BundleInvalid(f"{path.name}: batch {entry.get('batch')} cannot be read ({type(exc).__name__}); "
                                    "nothing was imported") from None
            if batch_hash(versions) != entry.get("hash") or len(versions) != entry.get("versions"):
                raise BundleInvalid(f"{path.name}: batch {entry['batch']} does not match its hash; nothing was imported")
            if any(v.device != device for v in versions):
                raise BundleInvalid(f"{path.name}: batch {entry['batch']} holds another device's versions; nothing was imported")
            batches.append((int(entry["batch"]), versions))
    return manifest, batches
