"""Bundles: a tablet's unacknowledged batches in one file, carried by USB when there is no Wi-Fi.

A bundle is a zip holding ``manifest.json`` and one ``batches/NNNNNN.json`` per batch. The manifest names the
format and its version, the device, the camp change-log position the tablet has pulled up to (``cursor``), and
each batch's number, version count and content hash (the same hash a push carries); it is sealed with an
HMAC-SHA256 keyed by the SHA-256 of the device's token, which the server keeps, so only the enrolled device can
make a bundle the server accepts. ``open_bundle`` checks everything
(entry sizes against their caps, zip CRCs, format, seal, every batch's hash, device and version ids) before
returning anything, then hands the batches over one at a time; an invalid bundle raises ``BundleInvalid`` with
the reason (``VersionIdMismatch`` for a version named as another's).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import json
import os
import uuid
import zipfile
import zlib
from pathlib import Path
from typing import Any, Callable, Iterator

from pydantic import TypeAdapter, ValidationError

from ..errors import BundleInvalid
from ..fields import MAX_JSON_INT
from .versions import Version, batch_hash, check_version_ids

__all__ = ["ARCHIVE_LOG_CAP", "BATCH_CAP", "BUNDLE_CAP", "BUNDLE_FORMAT", "BUNDLE_VERSION", "BundleReader", "CappedZip",
           "LINE_CAP", "MANIFEST_CAP", "open_bundle", "open_checked_zip", "read_bundle", "write_bundle"]

BUNDLE_FORMAT = "baulk-bundle"
BUNDLE_VERSION = 1


def _seal(manifest: dict[str, Any], token_hash: str) -> str:
    body = json.dumps({k: v for k, v in manifest.items() if k != "seal"}, sort_keys=True, separators=(",", ":"))
    return hmac.new(token_hash.encode(), body.encode(), hashlib.sha256).hexdigest()


def write_bundle(path: Path, *, device: uuid.UUID, label: str, token: str,
                 batches: list[tuple[int, list[Version]]], cursor: int | None = None) -> dict[str, Any]:
    """Write the bundle atomically (a temporary file renamed into place); returns its manifest. ``cursor`` is
    the camp change-log position the tablet has pulled up to: the camp server keeps it for the device and writes
    the device's return bundle from there (``schema.sync.return_bundle``)."""
    path = Path(path)
    manifest: dict[str, Any] = {
        "format": BUNDLE_FORMAT, "format_version": BUNDLE_VERSION, "device": str(device), "device_label": label,
        "created_at": dt.datetime.now(dt.timezone.utc).isoformat(),
        **({} if cursor is None else {"cursor": cursor}),
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


# -- reading, with caps: a zip's entries are checked against their caps before and while they are inflated ------
# A bundle or archive is a few megabytes compressed, but deflate turns a run of one byte into a thousandfold more:
# every entry's declared size is checked against its cap before a byte is read, and the bytes actually inflated
# are counted while reading (streamed in chunks), so a crafted file is refused before it can fill the memory.
MANIFEST_CAP = 1 << 20  # 1 MiB: a manifest lists its batches, about 150 bytes each
BATCH_CAP = 64 << 20  # 64 MiB: one batch file holds one push's versions (a push body is at most 16 MiB by default)
BUNDLE_CAP = 512 << 20  # 512 MiB: every batch file of one bundle together (about 1.5 million versions)
ARCHIVE_LOG_CAP = 1 << 30  # 1 GiB: a season archive's version log (about 3 million versions, read line by line)
LINE_CAP = 16 << 20  # 16 MiB: one line of a season archive's version log (one version)
CHUNK = 1 << 20  # bytes inflated per read
_ZIP_METHODS = (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED)  # others (bzip2, lzma) inflate unbounded per read call


def _mib(n: int) -> str:
    return f"{n >> 30} GiB" if n % (1 << 30) == 0 else f"{n / (1 << 20):g} MiB"


class CappedZip:
    """A Baulk zip (bundle, season archive) read entry by entry within caps; ``BundleInvalid`` names the file,
    the entry and the cap, and ``again`` says what to do (e.g. "copy it from the tablet again")."""

    def __init__(self, path: Path, *, what: str, again: str, total_cap: int):
        self.path, self.what, self.again, self.total_cap = Path(path), what, again, total_cap
        self.inflated = 0  # bytes inflated so far, every entry together
        try:
            self.zip = zipfile.ZipFile(self.path)
        except (zipfile.BadZipFile, OSError, ValueError) as exc:
            raise BundleInvalid(f"{self.path.name} is not a readable {what} ({exc}); {again}") from None

    def close(self) -> None:
        self.zip.close()

    def __enter__(self) -> "CappedZip":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _refuse(self, text: str) -> BundleInvalid:
        return BundleInvalid(f"{self.path.name}: {text}; it is not a {self.what} Baulk wrote, or it was altered. "
                             f"Nothing was imported: {self.again}")

    def info(self, name: str, cap: int) -> zipfile.ZipInfo:
        """The entry, after checking its declared size and compression against the caps (nothing inflated yet)."""
        try:
            info = self.zip.getinfo(name)
        except KeyError:
            raise KeyError(name) from None
        if info.compress_type not in _ZIP_METHODS:
            raise self._refuse(f"entry {name} is compressed with method {info.compress_type}; Baulk writes only "
                               "stored and deflated entries")
        if info.file_size > cap:
            raise self._refuse(f"entry {name} declares {info.file_size} bytes, more than the {_mib(cap)} such an "
                               "entry may hold")
        if self.inflated + info.file_size > self.total_cap:
            raise self._refuse(f"its entries declare more than the {_mib(self.total_cap)} a {self.what} may hold "
                               f"(at entry {name})")
        return info

    def chunks(self, name: str, cap: int) -> Iterator[bytes]:
        """The entry's bytes in chunks, counted as they are inflated: past ``cap`` (or the file's total cap) it
        is refused even if its declared size said less; a checksum that fails at the end is refused too."""
        info = self.info(name, cap)
        got = 0
        try:
            with self.zip.open(info) as fh:
                while chunk := fh.read(CHUNK):
                    got += len(chunk)
                    self.inflated += len(chunk)
                    if got > cap:
                        raise self._refuse(f"entry {name} inflates past the {_mib(cap)} such an entry may hold")
                    if self.inflated > self.total_cap:
                        raise self._refuse(f"its entries inflate past the {_mib(self.total_cap)} a {self.what} may "
                                           f"hold (at entry {name})")
                    yield chunk
        except (zipfile.BadZipFile, zlib.error, EOFError, OSError) as exc:
            raise BundleInvalid(f"{self.path.name} is damaged (entry {name} fails its checksum or cannot be "
                                f"inflated: {exc}); {self.again}") from None

    def read(self, name: str, cap: int) -> bytes:
        return b"".join(self.chunks(name, cap))

    def lines(self, name: str, cap: int, *, line_cap: int = LINE_CAP) -> Iterator[bytes]:
        """The entry's lines (without their newline), streamed; a line longer than ``line_cap`` is refused."""
        rest = b""
        for chunk in self.chunks(name, cap):
            rest += chunk
            *whole, rest = rest.split(b"\n")
            yield from whole
            if len(rest) > line_cap:
                raise self._refuse(f"a line of entry {name} runs past {_mib(line_cap)}")
        if rest:
            yield rest

    def manifest(self) -> dict[str, Any]:
        """``manifest.json``, within ``MANIFEST_CAP``, as a JSON object."""
        try:
            raw = self.read("manifest.json", MANIFEST_CAP)
            manifest = json.loads(raw)
        except (KeyError, ValueError):
            raise BundleInvalid(f"{self.path.name} has no readable manifest; it is not a Baulk {self.what} or it was "
                                "cut short") from None
        if not isinstance(manifest, dict):
            raise BundleInvalid(f"{self.path.name} has no readable manifest (it holds a JSON {type(manifest).__name__}, "
                                f"not an object); it is not a Baulk {self.what}")
        return manifest


def open_checked_zip(path: Path, *, what: str, again: str,
                     total_cap: int = BUNDLE_CAP) -> tuple[CappedZip, dict[str, Any]]:
    """Open a Baulk zip (bundle, season archive) and read its manifest within the caps; ``BundleInvalid`` says
    what is wrong, and ``again`` (e.g. "copy it from the tablet again") says what to do. Every entry read later
    through the returned ``CappedZip`` has its checksum checked as it is read."""
    z = CappedZip(path, what=what, again=again, total_cap=total_cap)
    try:
        return z, z.manifest()
    except BaseException:
        z.close()
        raise


def _whole(value: Any, low: int, high: int = MAX_JSON_INT) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and low <= value <= high


_BATCH: TypeAdapter[list[Version]] = TypeAdapter(list[Version])


class BundleReader:
    """A bundle checked whole (``open_bundle``): its manifest, its device, and its batches read again one at a
    time (``batches()``), each checked to be the very bytes the check passed, so a big bundle never sits in
    memory whole."""

    def __init__(self, z: CappedZip, manifest: dict[str, Any], device: uuid.UUID, entries: list[dict[str, Any]]):
        self.zip, self.manifest, self.device, self.entries = z, manifest, device, entries
        self._digests: dict[str, str] = {}

    def close(self) -> None:
        self.zip.close()

    def __enter__(self) -> "BundleReader":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _batch(self, entry: dict[str, Any]) -> tuple[list[Version], str]:
        name = self.zip.path.name
        try:
            raw = self.zip.read(entry["file"], BATCH_CAP)
        except KeyError:
            raise BundleInvalid(f"{name}: batch {entry['batch']} is missing (no entry {entry['file']}); it was cut "
                                "short or altered. Nothing was imported: copy it from the tablet again") from None
        digest = hashlib.sha256(raw).hexdigest()
        try:
            versions = _BATCH.validate_json(raw, strict=False)  # parsed by pydantic-core: no JSON tree in between
        except (ValueError, ValidationError) as exc:
            raise BundleInvalid(f"{name}: batch {entry['batch']} cannot be read ({type(exc).__name__}); "
                                "nothing was imported") from None
        return versions, digest

    def check(self) -> None:
        """Read every batch once: its hash, count, device and version ids (nothing is kept but a digest)."""
        name = self.zip.path.name
        for entry in self.entries:
            versions, digest = self._batch(entry)
            if batch_hash(versions) != entry["hash"] or len(versions) != entry["versions"]:
                raise BundleInvalid(f"{name}: batch {entry['batch']} does not match its hash; nothing was imported")
            if any(v.device != self.device for v in versions):
                raise BundleInvalid(f"{name}: batch {entry['batch']} holds another device's versions; nothing was "
                                    "imported")
            check_version_ids(versions, where=f"{name}: batch {entry['batch']}", fix=(
                "A tablet names each version by its own device and sequence, so this bundle was altered after the "
                "tablet wrote it; ask the data manager to check that tablet and re-enrol it as a new device."))
            self._digests[entry["file"]] = digest
        self.zip.inflated = 0  # the second reading has the same budget

    def batches(self) -> Iterator[tuple[int, list[Version], str]]:
        """Each batch again, in manifest order, as (number, versions, content hash): the same bytes the check
        read (so the hash the check matched is theirs)."""
        for entry in self.entries:
            versions, digest = self._batch(entry)
            if digest != self._digests.get(entry["file"]):
                raise BundleInvalid(f"{self.zip.path.name}: batch {entry['batch']} changed while it was being "
                                    "imported; nothing was imported")
            yield int(entry["batch"]), versions, str(entry["hash"])


def _entries(path: Path, manifest: dict[str, Any]) -> list[dict[str, Any]]:
    """The manifest's batch list, each entry checked for shape (number, file, count, hash), none twice."""
    batches = manifest.get("batches", [])
    bad = f"{path.name}: the manifest's batch list is not one Baulk writes"
    if not isinstance(batches, list):
        raise BundleInvalid(f"{bad} (it is a JSON {type(batches).__name__}); nothing was imported")
    seen_numbers: set[int] = set()
    seen_files: set[str] = set()
    for k, entry in enumerate(batches, start=1):
        if not (isinstance(entry, dict) and _whole(entry.get("batch"), 1) and isinstance(entry.get("file"), str)
                and _whole(entry.get("versions"), 0) and isinstance(entry.get("hash"), str)):
            raise BundleInvalid(f"{bad}: entry {k} needs a batch number from 1 to {MAX_JSON_INT}, a file, a version "
                                "count and a hash; nothing was imported")
        if entry["batch"] in seen_numbers or entry["file"] in seen_files:
            raise BundleInvalid(f"{bad}: batch {entry['batch']} ({entry['file']}) is listed twice; nothing was "
                                "imported")
        seen_numbers.add(entry["batch"])
        seen_files.add(entry["file"])
    return batches


def open_bundle(path: Path, token_hash_of: Callable[[uuid.UUID], str | None]) -> BundleReader:
    """Check the whole bundle (entry sizes, format, seal, every batch's hash, device and version ids) and return
    a reader for its batches; ``BundleInvalid`` (or ``VersionIdMismatch``) names what is wrong."""
    path = Path(path)
    z, manifest = open_checked_zip(path, what="bundle", again="copy it from the tablet again")
    try:
        if manifest.get("format") != BUNDLE_FORMAT:
            raise BundleInvalid(f"{path.name} is not a Baulk bundle (format {manifest.get('format')!r})")
        if manifest.get("format_version") != BUNDLE_VERSION:
            raise BundleInvalid(f"{path.name} has bundle format {manifest.get('format_version')}; this server reads "
                                f"format {BUNDLE_VERSION}: update Baulk on the server")
        try:
            device = uuid.UUID(str(manifest["device"]))
        except (KeyError, ValueError):
            raise BundleInvalid(f"{path.name} names no valid device") from None
        token_hash = token_hash_of(device)
        if token_hash is None:
            raise BundleInvalid(f"{path.name} comes from device {manifest.get('device_label', device)}, which is not "
                                "enrolled here (or was revoked); enrol it, then import again")
        if not hmac.compare_digest(str(manifest.get("seal", "")), _seal(manifest, token_hash)):
            raise BundleInvalid(f"{path.name} fails its seal: it was changed after the tablet wrote it, or made by "
                                "another device; nothing was imported")
        reader = BundleReader(z, manifest, device, _entries(path, manifest))
        reader.check()
    except BaseException:
        z.close()
        raise
    return reader


def read_bundle(path: Path, token_hash_of: Callable[[uuid.UUID], str | None]) -> tuple[dict[str, Any], list[tuple[int, list[Version]]]]:
    """Check the whole bundle and return its manifest and every batch at once (small bundles, tests; an import
    reads batch by batch through ``open_bundle``); ``BundleInvalid`` names what is wrong."""
    with open_bundle(path, token_hash_of) as bundle:
        return bundle.manifest, [(number, versions) for number, versions, _hash in bundle.batches()]
