"""Bundles on the tablet, both ways over a USB stick.

- ``export_bundle``: every batch the server has not acknowledged, in one sealed file, with the camp change-log
  position this tablet has pulled up to (the camp server writes the tablet's return bundle from there).
- ``read_return_bundle``: a return bundle the camp server wrote for this tablet (``baulk bundle for-tablet``),
  checked whole, then applied exactly as pull pages (``mobile.sync.apply_page``) in one transaction, once: a
  bundle read again, or one whose changes arrived by a sync meanwhile, changes nothing. The batches it says
  the camp holds are marked acknowledged, so the next bundle leaves them out. The thumbnail pack beside it is
  under its seal (``sealed_pack``): one that was changed is refused before anything is read; none is fine.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import sqlalchemy as sa

from schema.errors import BundleInvalid, BundleLeavesGap, StoreError
from schema.records import Device
from schema.sync.bundle import write_bundle
from schema.sync.replica import state_get
from schema.sync.return_bundle import RETURN_SUFFIX, open_return_bundle, safe_label
from schema.sync.tables import open_conflict

from . import outbox
from .store import TabletStore
from .sync import apply_page, cursor_of, pending_count

__all__ = ["ReturnRead", "export_bundle", "find_return_bundle", "keep_return_thumbnails", "read_return_bundle",
           "sealed_pack"]


def _enrolled(store: TabletStore) -> tuple[Any, str, str]:
    device_id, token = store.device_id(), store.token()
    if device_id is None or token is None:
        raise StoreError("this tablet is not enrolled (no device or token); enrol it with the camp server first")
    return device_id, token, store.get(Device, device_id).label


def export_bundle(store: TabletStore, out: Path, *, batch_size: int = 500) -> dict[str, Any]:
    """Write the unacknowledged batches to ``out`` (a folder gets a dated file name); returns the manifest."""
    device_id, token, label = _enrolled(store)
    outbox.cut_batches(store, size=batch_size)
    batches = [(n, outbox.batch_versions(store, n)) for n in outbox.unacked_batches(store)]
    with store.read() as conn:
        cursor = cursor_of(conn)
    out = Path(out)
    if out.is_dir():
        out = out / f"{label}-{dt.datetime.now(dt.timezone.utc):%Y%m%dT%H%M%SZ}.baulkbundle"
    manifest = write_bundle(out, device=device_id, label=label, token=token, batches=batches, cursor=cursor)
    from .photos import write_photo_pack  # the photo files the camp may lack, beside it (<bundle>.photos.zip)

    pack = write_photo_pack(store, out)
    return {"path": str(out), **manifest, "photos": pack[1] if pack else 0}


@dataclass(frozen=True)
class ReturnRead:
    """What reading a return bundle did, and ``sentence()`` to say it in plain words."""

    path: Path
    changes: int  # versions the bundle carries
    applied: int  # of them, new on this tablet
    reached: int  # the camp change-log position this tablet now holds everything up to
    already: bool  # read before (or its changes came by a sync): nothing changed
    new_blocks: list[tuple[int, int]] = field(default_factory=list)
    conflicts_settled: int = 0
    confirmed: int = 0  # this tablet's own changes the camp confirmed it holds
    numbers_left: int = 0
    rechecked: Any = None  # the live checks run again over what came in (mobile.checks.Rechecked)
    thumbnails: int = 0  # photo thumbnails kept from the pack beside the bundle (keep_return_thumbnails)

    def sentence(self) -> str:
        if self.already:
            return (f"{self.path.name} was read before: this tablet already holds every change in it (camp changes "
                    f"up to {self.reached}), so nothing changed.")
        held = self.changes - self.applied
        text = (f"Read {self.path.name}: {self.applied} new change{'' if self.applied == 1 else 's'} on this tablet"
                + (f" ({self.changes} in the bundle; {held} were here already)." if held else "."))
        if self.new_blocks:
            spans = ", ".join(f"{a}-{b}" for a, b in self.new_blocks)
            text += f" New find numbers: {spans}."
        if self.conflicts_settled:
            text += f" {self.conflicts_settled} conflict{'' if self.conflicts_settled == 1 else 's'} settled at camp."
        if self.confirmed:
            text += f" The camp confirmed {self.confirmed} change{'' if self.confirmed == 1 else 's'} this tablet sent."
        if self.rechecked is not None and (self.rechecked.now_failing or self.rechecked.cleared):
            text += " " + self.rechecked.sentence("this tablet")
        if self.thumbnails:
            text += f" {self.thumbnails} photo thumbnail{'' if self.thumbnails == 1 else 's'} from camp."
        return text + f" Find numbers left: {self.numbers_left}."


def find_return_bundle(folder: Path, label: str) -> Path:
    """The newest return bundle for ``label`` in ``folder`` (by the time in its name)."""
    mine = sorted(folder.glob(f"{safe_label(label)}-from-camp-*{RETURN_SUFFIX}"))
    if mine:
        return mine[-1]
    others = sorted(p.name for p in folder.glob(f"*{RETURN_SUFFIX}"))
    more = ", ..." if len(others) > 3 else ""
    held = f" (it holds {', '.join(others[:3])}{more}, for other tablets)" if others else ""
    raise StoreError(f"the folder {folder} holds no return bundle for {label}{held}; ask the data manager to write "
                     f"one with baulk bundle for-tablet {label} --out <the stick>, or choose the bundle file itself")


def read_return_bundle(store: TabletStore, path: Path) -> ReturnRead:
    """Check the return bundle at ``path`` (a file, or a folder holding this tablet's newest) whole, then apply
    its pages as pull pages in one transaction; a bundle that fails any check changes nothing."""
    device_id, token, label = _enrolled(store)
    path = Path(path)
    if path.is_dir():
        path = find_return_bundle(path, label)
    with open_return_bundle(path, device=device_id, token=token, label=label) as bundle:
        with store.read() as conn:
            cursor = cursor_of(conn)
        if bundle.next <= cursor and bundle.acked <= outbox.acked(store):
            return ReturnRead(path, bundle.versions, 0, cursor, already=True, numbers_left=store.numbers_left())
        if bundle.after > cursor:
            raise BundleLeavesGap(
                f"{path.name} starts after camp change {bundle.after}, but this tablet holds the camp's changes "
                f"only up to {cursor} (an older return bundle was not read, or this tablet file was restored from a "
                "copy); nothing was read. Read the older return bundle first, or write a bundle on this tablet (it "
                "tells the camp where this tablet stands), have it imported, and ask for a new return bundle for "
                f"{label}")
        sealed = sealed_pack(path, bundle.manifest.get("thumbnails"), label)  # before anything is applied
        blocks, unsent = {(b.first, b.last) for b in store.number_blocks()}, pending_count(store)
        with store.atomic() as conn:
            open_before = _open_conflicts(conn)
            applied, touched = 0, set()  # versions new here; (record, field) of each, for the live checks
            for _after, page_next, versions in bundle.pages():
                new = apply_page(conn, versions, page_next)
                applied += len(new)
                touched.update((v.record, v.field) for v in new)
            outbox.mark_acked(store, min(bundle.acked, int(state_get(conn, "last_batch", "0") or 0)))
            settled = max(0, open_before - _open_conflicts(conn))
            reached = cursor_of(conn)
    new_blocks = sorted({(b.first, b.last) for b in store.number_blocks()} - blocks)
    from .checks import recheck_arrived  # what came in may open or close live checks, as after a pull

    rechecked = recheck_arrived(store, touched) if applied else None  # None too: nothing the checks read came
    return ReturnRead(path, bundle.versions, applied, reached, already=False, new_blocks=new_blocks,
                      conflicts_settled=settled, confirmed=unsent - pending_count(store),
                      numbers_left=store.numbers_left(), rechecked=rechecked,
                      thumbnails=keep_return_thumbnails(store, path, sealed=sealed))


def _open_conflicts(conn: sa.Connection) -> int:
    return int(conn.execute(sa.select(sa.func.count()).select_from(open_conflict)).scalar_one())


def _pack_path(bundle: Path) -> Path:
    return bundle.with_name(bundle.name + ".thumbs.zip")


def _file_sha256(path: Path) -> str:
    import hashlib

    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def sealed_pack(bundle: Path, named: Any, label: str) -> dict[str, Any] | None:
    """Check the thumbnail pack beside a return bundle (``<bundle>.thumbs.zip``) against what the bundle's sealed
    manifest names (``thumbnails``: file, SHA-256, size). A missing pack is allowed (thumbnails are optional:
    None); a pack whose size or hash differs, or one the bundle does not name, is refused (``BundleInvalid``,
    naming the file and the fix) before anything is read."""
    pack = _pack_path(bundle)
    if not pack.is_file():
        return None
    fix = (f"Nothing was read. Copy {pack.name} again together with {bundle.name} from the camp computer (or ask "
           f"the data manager to write both again: baulk bundle for-tablet {label}), or delete {pack.name} to read "
           "the bundle without its photo thumbnails")
    if named is None:
        raise BundleInvalid(f"{pack.name} lies beside {bundle.name}, but the bundle's seal names no thumbnail pack: "
                            f"it belongs to another bundle or was put there by hand. {fix}")
    if not (isinstance(named, dict) and isinstance(named.get("sha256"), str) and isinstance(named.get("bytes"), int)
            and named.get("file") == pack.name):
        raise BundleInvalid(f"{bundle.name}: its manifest names the thumbnail pack in a way Baulk does not write "
                            f"(file, sha256, bytes). {fix}")
    size = pack.stat().st_size
    if size != named["bytes"]:
        differs = f"it has {size} bytes; the seal names {named['bytes']}"
    elif _file_sha256(pack) != named["sha256"]:
        differs = "its SHA-256 is not the one the seal names"
    else:
        return dict(named)
    raise BundleInvalid(f"{pack.name} is not the thumbnail pack the camp server sealed with {bundle.name} "
                        f"({differs}): it was changed, cut short or swapped after it was written. {fix}")


def keep_return_thumbnails(store: TabletStore, bundle: Path, *, sealed: dict[str, Any] | None) -> int:
    """Keep the thumbnails in the pack beside a return bundle (``<bundle>.thumbs.zip``, written by the camp's
    ``sync_server.bundles.write_thumbnail_pack``) where this tablet's photo lists look for them
    (``mobile.photos.thumbnail``'s files): only of photo records it holds and whose files it does not, each a
    PNG Pillow reads, written to a temporary name, flushed and renamed. ``sealed`` is what ``sealed_pack``
    returned (None: no pack to keep); the pack is checked against it again as it is opened. The number kept."""
    import io
    import os
    import uuid
    import zipfile

    from PIL import Image

    from schema.records import Photo

    from .photos import THUMB_PIXELS, photo_folder, photo_path

    pack = _pack_path(bundle)
    if sealed is None or not pack.is_file():
        return 0
    if pack.stat().st_size != sealed["bytes"] or _file_sha256(pack) != sealed["sha256"]:
        return 0  # changed since the check a moment ago: none kept (the bundle itself was read)
    folder = photo_folder(store)
    wanted = {p.sha256 for p in store.list(Photo)}
    kept = 0
    with zipfile.ZipFile(pack) as z:
        for info in z.infolist():
            sha = info.filename.removesuffix(".png")
            if sha not in wanted or photo_path(folder, sha).exists() or info.file_size > 2 * 1024 * 1024:
                continue
            data = z.read(info)
            try:
                with Image.open(io.BytesIO(data)) as img:
                    if img.format != "PNG" or max(img.size) > 4 * THUMB_PIXELS:
                        continue
                    img.load()
            except (OSError, SyntaxError):
                continue
            out = folder / "thumbs" / f"{sha}-{THUMB_PIXELS}.png"
            out.parent.mkdir(parents=True, exist_ok=True)
            tmp = out.with_name(f".{uuid.uuid4().hex}.tmp")
            with open(tmp, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, out)
            kept += 1
    return kept
