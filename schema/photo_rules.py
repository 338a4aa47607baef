"""The rule that a find's ``photo_hashes`` follows its photo records, and the photo void and restore that keep it:
one source for the tablet (``mobile.photos``) and the camp server (``sync_server.curation``).

The functions read through a connection (``schema.db``) and write through a ``save(conn, record, new=False)``
callable (a store's ``save_versioned``, so every change becomes versions that sync), in the caller's
transaction. The rule: the hash of every photo of a find that is not voided is in the find's ``photo_hashes``;
the hash of a voided photo is out, unless a photo of the find that is not voided has the same file. Hashes no
photo record names (set before photo records existed) are left alone.
"""

from __future__ import annotations

import uuid
from typing import Any, Callable

from schema import db
from schema.errors import FieldProblem, RecordInvalid, RecordNotFound
from schema.records import Find, Photo
from schema.validation import check

__all__ = ["Save", "follow_find", "follow_photo_hashes", "restore_photo", "void_photo"]

Save = Callable[..., None]
"""``save(conn, record, new=False)``: a store's versioned save."""


def follow_find(save: Save, conn: Any, find_id: uuid.UUID) -> bool:
    """Bring one find's ``photo_hashes`` in line with its photo records; True when the find was saved."""
    try:
        find = db.get(conn, Find, find_id)
    except RecordNotFound:
        return False  # a photo of a find this store does not hold (yet): nothing to follow
    photos = list(db.select(conn, Photo, subject_id=find_id))
    kept = {p.sha256 for p in photos if not p.voided}
    gone = {p.sha256 for p in photos if p.voided} - kept
    wanted = [h for h in find.photo_hashes if h not in gone] + sorted(kept - set(find.photo_hashes))
    if wanted == list(find.photo_hashes):
        return False
    save(conn, find.model_copy(update={"photo_hashes": wanted}), new=False)
    return True


def follow_photo_hashes(conn: Any, save: Save) -> int:
    """Every photographed find's ``photo_hashes`` brought in line (``follow_find``); the number of finds changed."""
    finds = {p.subject_id for p in db.select(conn, Photo, subject="find") if p.subject_id is not None}
    return sum(follow_find(save, conn, find_id) for find_id in sorted(finds))


def _photo(conn: Any, photo_id: uuid.UUID) -> Photo:
    try:
        return db.get(conn, Photo, photo_id)
    except RecordNotFound:
        raise RecordNotFound(f"no photo has id {photo_id}; choose a photo from the register") from None


def _set(conn: Any, save: Save, photo_id: uuid.UUID, *, void: bool, reason: str,
         record: str | None) -> tuple[Photo, bool]:
    current = _photo(conn, photo_id)
    what = record or f"{'void' if void else 'restore'} of photo P{current.number}"
    text = (reason or "").strip()
    if not text:
        fix = "say why the photo is voided (e.g. another find's photo)" if void else \
            "say why the photo is back in force (e.g. it was the right find after all)"
        raise RecordInvalid(what, [FieldProblem("reason", f"a {'void' if void else 'restore'} needs a reason", fix)])
    if current.voided == void:
        return current, False
    updated = check(Photo, {**current.model_dump(), "voided": void, "void_reason": text}, record=what)
    save(conn, updated, new=False)
    if current.subject == "find" and current.subject_id is not None:
        follow_find(save, conn, current.subject_id)
    return updated, True


def void_photo(conn: Any, save: Save, photo_id: uuid.UUID, reason: str, *,
               record: str | None = None) -> tuple[Photo, bool]:
    """Void a photo with a reason (the register keeps it, marked); a find's ``photo_hashes`` follows.
    (the photo as it is now, whether it changed); a photo voided already is left as it is."""
    return _set(conn, save, photo_id, void=True, reason=reason, record=record)


def restore_photo(conn: Any, save: Save, photo_id: uuid.UUID, reason: str, *,
                  record: str | None = None) -> tuple[Photo, bool]:
    """Put a voided photo back in force; ``reason`` replaces its ``void_reason`` (which nothing reads as a void:
    only ``voided`` does) and the find's ``photo_hashes`` gains its hash again. (the photo, whether it changed)."""
    return _set(conn, save, photo_id, void=False, reason=reason, record=record)
