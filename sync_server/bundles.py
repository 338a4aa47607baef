"""Bundles on the camp server, both ways over a USB stick.

- ``import_bundle``: a tablet's bundle, checked whole, then applied through the same code path as a push, all
  batches in one transaction (so a failure part-way changes nothing). The batches are read from the file one at a
  time (after the check, each again), so memory does not grow with the bundle's size. The camp change-log
  position the tablet reports it has pulled up to is kept for the device (in ``sync_state``).
- ``write_for_tablet``: the device's return bundle: what its pull would get after that position (its number
  blocks, a new one first when half of its newest is used, as at a push; resolutions, corrections, other
  devices' work) and which of its batches the camp holds, sealed for that device
  (``schema.sync.return_bundle``). Beside it, ``<bundle>.thumbs.zip`` carries thumbnails only (never the photo
  files) of the photos whose records it brings and which that tablet did not take, as the device may see them
  (``photos.withheld_photo``); the tablet keeps them for its photo lists. The pack is written before the
  bundle's manifest is sealed, and the manifest names its SHA-256 and size (``pack_facts``), so the pack is
  under the bundle's seal: the tablet refuses a pack that was changed or swapped (a missing one is allowed).
"""

from __future__ import annotations

import datetime as dt
import uuid
from pathlib import Path
from typing import Any, Iterator

import sqlalchemy as sa

from schema.errors import RecordNotFound, StoreError, SyncError
from schema.records import Device
from schema.sync.bundle import open_bundle
from schema.sync.replica import load_identity, state_get, state_set
from schema.sync.return_bundle import reported_cursor, return_bundle_name, write_return_bundle
from schema.sync.versions import Version

from .store import ServerStore
from .sync import MAX_PAGE, _top_up, apply_push, pull_page
from .tables import push_batch

__all__ = ["RETURN_THUMB_PIXELS", "device_cursor", "import_bundle", "pack_facts", "thumbnail_pack_path",
           "write_for_tablet",
           "write_thumbnail_pack"]


def _cursor_key(device_id: uuid.UUID) -> str:
    return f"cursor:{device_id.hex}"  # 39 characters: sync_state keys hold 40


def device_cursor(store: ServerStore, device_id: uuid.UUID) -> int:
    """The camp change-log position the device last reported in a bundle (0 when it never sent one)."""
    with store.read() as conn:
        return int(state_get(conn, _cursor_key(device_id), "0") or 0)


def import_bundle(store: ServerStore, path: Path, *, photos_dir: Path | None = None) -> dict[str, Any]:
    """Apply every batch of the bundle once (batches already applied by a push are answered from their ack).

    ``refused`` lists the versions of newly applied batches the server would not take from this device (set-up
    records only a manager writes; see ``sync_server.sync.apply_push``), each with its reason."""

    def token_hash_of(device_id: uuid.UUID) -> str | None:
        found = store.list(Device, id=device_id)
        return found[0].token_hash if found and found[0].revoked_at is None else None

    acks = []
    with open_bundle(path, token_hash_of) as bundle:  # checked whole here; batches are read again one at a time
        cursor = reported_cursor(bundle.manifest, Path(path).name)
        device = store.get(Device, bundle.device)
        with store.atomic() as conn:
            for number, versions, content_hash in bundle.batches():
                acks.append(apply_push(store, device=device, batch=number, content_hash=content_hash,
                                       versions=versions))
            if cursor is not None:
                state_set(conn, _cursor_key(device.id), cursor)
    fresh = [a for a in acks if not a["replayed"]]
    from .photos import import_photo_pack, vault_for  # the photo pack beside it, after the records that name them

    photos = import_photo_pack(store, vault_for(store, photos_dir), Path(path))
    return {"device": device.label, "batches": len(acks), "applied": sum(a["applied"] for a in fresh),
            "replayed": len(acks) - len(fresh), "refused": [r for a in fresh for r in a["refused"]], "acks": acks,
            "cursor": cursor, "photos": photos}


def _acked(conn: sa.Connection, device_id: uuid.UUID) -> int:
    """The device's batches held here without a gap: every batch from 1 up to the number returned."""
    held = 0
    for number in conn.execute(sa.select(push_batch.c.batch).where(push_batch.c.device == device_id)
                               .order_by(push_batch.c.batch)).scalars():
        if number != held + 1:
            break
        held = number
    return held


def _device(store: ServerStore, label: str) -> Device:
    found = store.list(Device, label=label)
    if not found:
        known = ", ".join(sorted(d.label for d in store.list(Device) if d.token_hash and d.revoked_at is None))
        raise RecordNotFound(f"no device is labelled {label!r} (enrolled devices: {known or 'none yet'}); give the "
                             "label baulk device list shows")
    device = found[0]
    if device.revoked_at is not None:
        raise SyncError(f"device {device.label} was revoked on {device.revoked_at:%Y-%m-%d}, so no return bundle is "
                        "written for it; enrol the tablet again as a new device")
    if not device.token_hash:
        raise SyncError(f"device {device.label} has not finished its enrolment (its code was never used), so there "
                        "is no key to seal a return bundle with; enrol the tablet first")
    return device


def write_for_tablet(store: ServerStore, *, label: str, out: Path, now: dt.datetime | None = None,
                     photos_dir: Path | None = None) -> dict[str, Any]:
    """Write the return bundle of the device ``label`` to ``out`` (a folder gets ``<label>-from-camp-<time>``).

    First, as at a push, a recorder that has used half of its newest number block is issued a new one. Then the
    change log after the position the device last reported is written page by page, as ``pull_page`` serves it
    to that device, with the number of its batches held here (the tablet stops carrying them). Returns the
    manifest with ``path``, ``issued`` (blocks issued now), ``blocks`` (all of the device's blocks) and
    ``from_camp`` (versions the camp server made: resolutions, corrections, blocks) and ``thumbnails`` (in the
    thumbnail pack beside it)."""
    device = _device(store, label)
    out = Path(out)
    path = out / return_bundle_name(device.label, now or dt.datetime.now(dt.timezone.utc)) if out.is_dir() else out
    if not path.parent.is_dir():  # before a block is issued for a bundle that cannot be written
        raise StoreError(f"the folder {path.parent} does not exist; plug the stick in and give its folder (or a "
                         "file in it) as --out")
    with store.atomic() as conn:
        store._serialize(conn, "changelog")  # noqa: SLF001 - as apply_push, before a block joins the log
        issued = _top_up(store, conn, device, now)
        after = int(state_get(conn, _cursor_key(device.id), "0") or 0)
        acked = _acked(conn, device.id)
        camp = load_identity(conn).device
    counts = {"from_camp": 0}
    photo_ids: set[uuid.UUID] = set()

    def pages() -> Iterator[tuple[int, int, list[Version]]]:
        cursor = after
        while True:
            page = pull_page(store, after=cursor, limit=MAX_PAGE, device=device)
            if page["versions"] or page["next"] > cursor:
                counts["from_camp"] += sum(v.device == camp for v in page["versions"])
                photo_ids.update(v.record_id for v in page["versions"] if v.record == "photo")
                yield cursor, page["next"], page["versions"]
            cursor = page["next"]
            if not page["more"]:
                return

    from .photos import vault_for

    def pack() -> dict[str, Any] | None:  # after the pages (they name the photos), before the seal
        counts["thumbnails"] = write_thumbnail_pack(store, vault_for(store, photos_dir), device, path, photo_ids)
        return pack_facts(thumbnail_pack_path(path), counts["thumbnails"]) if counts["thumbnails"] else None

    try:
        manifest = write_return_bundle(path, device=device.id, label=device.label,
                                       token_hash=str(device.token_hash), after=after, pages=pages(), acked=acked,
                                       beside=pack)
    except BaseException:
        thumbnail_pack_path(path).unlink(missing_ok=True)  # no pack without the bundle that seals it
        raise
    return {**manifest, "path": str(path), "issued": [(b.first, b.last) for b in issued],
            "blocks": [(b.first, b.last) for b in store.blocks_for(device.id)],
            "versions": sum(p["versions"] for p in manifest["pages"]), **counts}



RETURN_THUMB_PIXELS = 256
"""The thumbnails' longest side in a return bundle's pack (the tablet's own thumbnails are this size too)."""


def thumbnail_pack_path(bundle: Path) -> Path:
    """The thumbnail pack that travels beside a return bundle: ``<bundle>.thumbs.zip``."""
    return bundle.with_name(bundle.name + ".thumbs.zip")


def pack_facts(pack: Path, count: int) -> dict[str, Any]:
    """What a return bundle's sealed manifest says of its thumbnail pack (``thumbnails``): the file's name, its
    SHA-256 and size, and how many thumbnails it holds; the tablet refuses a pack that differs."""
    import hashlib

    digest = hashlib.sha256()
    with open(pack, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return {"file": pack.name, "sha256": digest.hexdigest(), "bytes": pack.stat().st_size, "count": count}


def write_thumbnail_pack(store: ServerStore, vault: Any, device: Device, bundle: Path,
                         photo_ids: set[uuid.UUID]) -> int:
    """Write ``<bundle>.thumbs.zip``: a PNG thumbnail (``<hash>.png``) of each photo among ``photo_ids`` that the
    device did not take, that the camp holds and that the device may see; written to a temporary name, flushed
    and renamed. An old pack of that name is removed first; none is written when there is nothing to carry.
    Returns the number of thumbnails. A photo that cannot be decoded is left out (its record still travels)."""
    import os
    import zipfile

    from schema.errors import PhotoError
    from schema.tables import metadata

    from .photos import withheld_photo

    out = thumbnail_pack_path(bundle)
    out.unlink(missing_ok=True)
    photo = metadata.tables["photo"]
    with store.read() as conn:
        rows = conn.execute(sa.select(photo.c.sha256).where(
            photo.c.id.in_(sorted(photo_ids)), photo.c.device_id != device.id, photo.c.voided.is_(False))).scalars()
        shas = sorted({sha for sha in rows if not withheld_photo(conn, sha, device.role)})
    thumbs = []
    for sha in shas:
        if vault.has(sha):
            try:
                thumbs.append((sha, vault.thumbnail(sha, size=RETURN_THUMB_PIXELS)))
            except PhotoError:
                continue
    if not thumbs:
        return 0
    tmp = out.with_name(out.name + ".part")
    try:
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_STORED) as z:  # PNG is compressed already
            for sha, thumb in thumbs:
                z.write(thumb, arcname=f"{sha}.png")
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        tmp.replace(out)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return len(thumbs)
