"""Return bundles: what a tablet would pull, written by the camp server for that one device and carried back on
a USB stick (``baulk bundle for-tablet`` writes one; the tablet's Camp screen and ``baulk bundle read`` read it).

A return bundle is a zip holding ``manifest.json`` and one ``pages/NNNNNN.json`` per page of the camp's change
log. The manifest names the format and its version, the device it is for, the change-log position it starts
after (the cursor the device last reported in a bundle of its own; 0 when it never sent one) and the position
it reaches, the device's own batches the camp holds (``acked``: every batch up to that number, so the tablet
stops carrying them), each page's positions, version count and content hash (``batch_hash``), and the thumbnail
pack beside it (``thumbnails``: its file name, SHA-256, size and count; null for none). It is sealed like the
device's own bundles (``schema.sync.bundle``): an HMAC-SHA256 keyed by the SHA-256 of the device's token, which
the server keeps and the tablet computes from its token, so no other device can read one as its own and a
changed byte is caught.

``open_return_bundle`` checks everything (entry caps, zip CRCs, format, device, seal, pages that run on from one
another, every page's hash, count and version ids) before returning anything, then hands the pages over again
one at a time, each checked to be the very bytes the check passed. The tablet applies them as pull pages.

A tablet's own bundle carries its pull cursor in its manifest (``cursor``); ``reported_cursor`` reads it back
for the server, which keeps it per device and writes the device's next return bundle from there.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import json
import os
import re
import uuid
import zipfile
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

from ..errors import BundleForAnotherDevice, BundleInvalid
from ..fields import MAX_JSON_INT
from .bundle import _BATCH, BATCH_CAP, BUNDLE_FORMAT, CappedZip, _seal, _whole, open_checked_zip
from .versions import Version, batch_hash, check_version_ids

__all__ = ["RETURN_FORMAT", "RETURN_SUFFIX", "RETURN_VERSION", "ReturnBundleReader", "open_return_bundle",
           "reported_cursor", "return_bundle_name", "write_return_bundle"]

RETURN_FORMAT = "baulk-return-bundle"
RETURN_VERSION = 1
RETURN_SUFFIX = ".baulkreturn"


def return_bundle_name(label: str, at: dt.datetime) -> str:
    """The file name a return bundle for ``label`` gets in a folder: ``<label>-from-camp-<UTC time>.baulkreturn``
    (a label's characters other than letters, digits, ``.``, ``_`` and ``-`` become ``_``); names sort by time."""
    return f"{safe_label(label)}-from-camp-{at.astimezone(dt.timezone.utc):%Y%m%dT%H%M%SZ}{RETURN_SUFFIX}"


def safe_label(label: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]", "_", label) or "device"


def write_return_bundle(path: Path, *, device: uuid.UUID, label: str, token_hash: str, after: int,
                        pages: Iterable[tuple[int, int, list[Version]]], acked: int = 0,
                        beside: Callable[[], dict[str, Any] | None] | None = None) -> dict[str, Any]:
    """Write ``pages`` (each ``(after, next, versions)``, in change-log order, starting after ``after``) into one
    file sealed for ``device``, with ``acked`` (the device's batches up to that number are held at camp),
    atomically (a temporary file renamed into place; removed when writing fails); returns the manifest. Pages
    are written as they come, so the change log never sits in memory whole.

    ``beside``, called once the pages are written and before the seal, names a file written beside the bundle
    (the thumbnail pack: its ``file`` name, ``sha256``, ``bytes`` and ``count``); it goes into the manifest as
    ``thumbnails`` (null: none), under the seal."""
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    entries: list[dict[str, Any]] = []
    try:
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as z:
            for k, (page_after, page_next, versions) in enumerate(pages, start=1):
                entry = {"page": k, "after": page_after, "next": page_next, "versions": len(versions),
                         "hash": batch_hash(versions), "file": f"pages/{k:06d}.json"}
                z.writestr(entry["file"], json.dumps([v.model_dump(mode="json") for v in versions]))
                entries.append(entry)
            manifest: dict[str, Any] = {
                "format": RETURN_FORMAT, "format_version": RETURN_VERSION, "device": str(device), "device_label": label,
                "created_at": dt.datetime.now(dt.timezone.utc).isoformat(), "after": after,
                "next": entries[-1]["next"] if entries else after, "acked": acked, "pages": entries,
                "thumbnails": beside() if beside is not None else None,
            }
            manifest["seal"] = _seal(manifest, token_hash)
            z.writestr("manifest.json", json.dumps(manifest, indent=2))
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        tmp.replace(path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return manifest


def reported_cursor(manifest: dict[str, Any], name: str) -> int | None:
    """The camp change-log position a tablet's own bundle says the tablet has pulled up to (None: a bundle
    written before return bundles existed, which says nothing)."""
    if "cursor" not in manifest:
        return None
    cursor = manifest["cursor"]
    if not _whole(cursor, 0):
        shown = json.dumps(cursor)[:40]
        raise BundleInvalid(f"{name}: the manifest's cursor {shown} is not a change-log position (a whole number "
                            f"from 0 to {MAX_JSON_INT}); it is not a bundle Baulk wrote, or it was altered. Nothing "
                            "was imported: copy it from the tablet again")
    return int(cursor)


class ReturnBundleReader:
    """A return bundle checked whole (``open_return_bundle``): its manifest, the positions it runs from and to,
    and its pages read again one at a time (``pages()``)."""

    def __init__(self, z: CappedZip, manifest: dict[str, Any], entries: list[dict[str, Any]], again: str):
        self.zip, self.manifest, self.entries, self.again = z, manifest, entries, again
        self.after, self.next, self.acked = int(manifest["after"]), int(manifest["next"]), int(manifest["acked"])
        self.versions = sum(int(e["versions"]) for e in entries)
        self._digests: dict[str, str] = {}

    @property
    def name(self) -> str:
        return self.zip.path.name

    def close(self) -> None:
        self.zip.close()

    def __enter__(self) -> "ReturnBundleReader":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _page(self, entry: dict[str, Any]) -> tuple[list[Version], str]:
        try:
            raw = self.zip.read(entry["file"], BATCH_CAP)
        except KeyError:
            raise BundleInvalid(f"{self.name}: page {entry['page']} is missing (no entry {entry['file']}); it was cut "
                                f"short or altered. Nothing was read: {self.again}") from None
        try:
            versions = _BATCH.validate_json(raw, strict=False)
        except ValueError as exc:
            raise BundleInvalid(f"{self.name}: page {entry['page']} cannot be read ({type(exc).__name__}); nothing "
                                f"was read: {self.again}") from None
        return versions, hashlib.sha256(raw).hexdigest()

    def check(self) -> None:
        """Read every page once: its hash, count and version ids (nothing is kept but a digest)."""
        for entry in self.entries:
            versions, digest = self._page(entry)
            if batch_hash(versions) != entry["hash"] or len(versions) != entry["versions"]:
                raise BundleInvalid(f"{self.name}: page {entry['page']} does not match its hash; it was changed after "
                                    f"the camp server wrote it. Nothing was read: {self.again}")
            check_version_ids(versions, where=f"{self.name}: page {entry['page']}", fix=(
                "A version is named by the device that made it, so this return bundle was altered after the camp "
                f"server wrote it, or the camp server holds a version it should have refused; {self.again}."))
            self._digests[entry["file"]] = digest
        self.zip.inflated = 0  # the second reading has the same budget

    def pages(self) -> Iterator[tuple[int, int, list[Version]]]:
        """Each page again, in order, as (after, next, versions): the same bytes the check read."""
        for entry in self.entries:
            versions, digest = self._page(entry)
            if digest != self._digests.get(entry["file"]):
                raise BundleInvalid(f"{self.name}: page {entry['page']} changed while it was being read; nothing was "
                                    "read")
            yield int(entry["after"]), int(entry["next"]), versions


def _positions(name: str, manifest: dict[str, Any], again: str) -> list[dict[str, Any]]:
    """The manifest's positions, batch count and page list, each page running on from the one before."""
    bad = f"{name}: the manifest's list of pages is not one Baulk writes"
    after, reached, pages = manifest.get("after"), manifest.get("next"), manifest.get("pages")
    if not (_whole(after, 0) and _whole(reached, 0) and _whole(manifest.get("acked"), 0) and isinstance(pages, list)):
        raise BundleInvalid(f"{bad} (it needs the positions it starts after and reaches, the batches held at camp, "
                            f"and a list of pages). Nothing was read: {again}")
    cursor = after
    for k, entry in enumerate(pages, start=1):
        if not (isinstance(entry, dict) and entry.get("page") == k and isinstance(entry.get("file"), str)
                and _whole(entry.get("versions"), 0) and isinstance(entry.get("hash"), str)
                and entry.get("after") == cursor and _whole(entry.get("next"), cursor + 1)):
            raise BundleInvalid(f"{bad}: page {k} needs its number {k}, a file, a version count, a hash, and positions "
                                f"running on from {cursor}. Nothing was read: {again}")
        cursor = entry["next"]
    if cursor != reached:
        raise BundleInvalid(f"{bad}: its pages reach position {cursor}, not {reached}. Nothing was read: {again}")
    return pages


def open_return_bundle(path: Path, *, device: uuid.UUID, token: str, label: str) -> ReturnBundleReader:
    """Check the whole return bundle for this tablet (``device``, its ``token`` and ``label``) and return a reader
    for its pages; ``BundleInvalid`` (``BundleForAnotherDevice``, ``VersionIdMismatch``) says what is wrong."""
    path = Path(path)
    name = path.name
    again = f"ask the data manager to write it again (baulk bundle for-tablet {label}) and copy it onto the stick"
    z, manifest = open_checked_zip(path, what="return bundle", again=again)
    try:
        fmt, version = manifest.get("format"), manifest.get("format_version")
        if fmt == BUNDLE_FORMAT:
            raise BundleInvalid(f"{name} is a bundle a tablet wrote for the camp server, not a return bundle from "
                                "camp; give it to the data manager to import (baulk bundle import), and read the "
                                f"return bundle the camp writes for this tablet (baulk bundle for-tablet {label})")
        if fmt != RETURN_FORMAT:
            raise BundleInvalid(f"{name} is not a Baulk return bundle (format {json.dumps(fmt)[:40]}); {again}")
        if version != RETURN_VERSION:
            raise BundleInvalid(f"{name} has return-bundle format {json.dumps(version)[:20]}; this tablet reads format "
                                f"{RETURN_VERSION}: update Baulk on this tablet, or {again}")
        try:
            meant = uuid.UUID(str(manifest["device"]))
        except (KeyError, ValueError):
            raise BundleInvalid(f"{name} names no valid device; {again}") from None
        if meant != device:
            other = str(manifest.get("device_label") or meant)[:60]
            raise BundleForAnotherDevice(
                f"{name} was written for {other}, not for this tablet ({label}); nothing was read. Ask the data "
                f"manager for this tablet's own: baulk bundle for-tablet {label} --out <the stick>")
        token_hash = hashlib.sha256(token.encode()).hexdigest()
        if not hmac.compare_digest(str(manifest.get("seal", "")), _seal(manifest, token_hash)):
            raise BundleInvalid(f"{name} fails its seal: it was changed after the camp server wrote it, or sealed with "
                                f"another device's key. Nothing was read: {again}")
        reader = ReturnBundleReader(z, manifest, _positions(name, manifest, again), again)
        reader.check()
    except BaseException:
        z.close()
        raise
    return reader
