"""The Photo button of Record, Units and Day: take or choose a picture of the find just saved, the current unit,
the trench or the day, and keep it with its register entry (``mobile.photos.save_photo``).

Where the picture comes from is the screen's business: on Android the system camera (``mobile.photos.android_camera``),
on a desktop or Linux tablet a file chosen from a folder. The controller takes the picture's path and the form's
strings.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from pathlib import Path

from schema.errors import FieldProblem, RecordInvalid
from schema.records import Photo
from schema.records.photo import FACINGS

from ..photos import (copy_from, free_space_line, photo_folder, photo_path, save_photo, thumbnail, thumbnail_if_kept,
                      void_photo)
from .day import DayController

__all__ = ["PhotoController", "PhotoTarget"]


@dataclass(frozen=True)
class PhotoTarget:
    """What the next photo will show: a subject kind and its record (None for the day), and how it is named."""

    subject: str
    subject_id: uuid.UUID | None
    label: str


class PhotoController:
    """Photos of the day's finds, units, trench and work (reads ``DayController.day``)."""

    def __init__(self, days: DayController):
        self.days = days
        self.store = days.store
        self.folder = photo_folder(self.store)

    # -- what the photo shows ------------------------------------------------------------------------------------
    def of_find(self, find_id: uuid.UUID, number: int) -> PhotoTarget:
        return PhotoTarget("find", find_id, f"find {number}")

    def of_unit(self, code: str | None = None) -> PhotoTarget:
        """The unit ``code`` of today's trench, or the day's unit."""
        unit = next((u for u in self.days.units() if u.code == code), None) if code else self.days.require_day().unit
        if unit is None:
            what = f"no unit {code!r} in today's trench" if code else "no unit is chosen"
            raise RecordInvalid("photo", [FieldProblem("unit", what, "choose the unit under Units or Day")])
        return PhotoTarget("unit", unit.id, f"unit {unit.code}")

    def of_trench(self) -> PhotoTarget:
        trench = self.days.require_day().trench
        return PhotoTarget("trench", trench.id, f"trench {trench.code}")

    def of_day(self) -> PhotoTarget:
        return PhotoTarget("day", None, f"the day in {self.days.require_day().trench.code}")

    # -- keeping one -------------------------------------------------------------------------------------------
    def facings(self) -> list[str]:
        return ["", *FACINGS]

    def keep(self, target: PhotoTarget, picture: Path | str, *, caption: str = "", facing: str = "",
             scale: bool = False, north_arrow: bool = False) -> Photo:
        """Keep the picture at ``picture`` (a camera's file or a chosen one) as a photo of ``target``."""
        day = self.days.require_day()
        path = Path(picture)
        return save_photo(self.store, data=copy_from(path), subject=target.subject, subject_id=target.subject_id,
                          site_id=day.site.id, trench_id=day.trench.id, by=day.recorder, caption=caption.strip(),
                          facing=facing or None, scale_in_frame=scale, north_arrow_in_frame=north_arrow,
                          taken_at=day.now(), folder=self.folder, name=path.name)

    def void(self, photo: Photo, reason: str) -> Photo:
        """Void a photo with a reason (kept in the register, marked); a find's ``photo_hashes`` loses its hash."""
        what = f"void of photo P{photo.number}"  # a refusal names what was refused
        if not (reason or "").strip():
            raise RecordInvalid(what, [FieldProblem("reason", "a void needs a reason",
                                                    "say why the photo is voided (e.g. another find's photo)")])
        try:
            return void_photo(self.store, photo.id, reason)
        except RecordInvalid as exc:  # e.g. a reason longer than the register keeps
            raise RecordInvalid(what, exc.problems) from None

    def photos_of(self, subject_id: uuid.UUID) -> list[Photo]:
        return [p for p in self.store.list(Photo, subject_id=subject_id, order_by="number") if not p.voided]

    def thumbnail(self, photo: Photo) -> Path:
        return thumbnail(self.folder, photo.sha256)

    def newest_photo(self, subject_id: uuid.UUID) -> Photo | None:
        """The newest photo of a find or unit (not voided), as the find list picks it; None when it has none."""
        kept = self.photos_of(subject_id)
        return max(kept, key=lambda p: (p.taken_at, p.number)) if kept else None

    def thumbnail_if_kept(self, photo: Photo) -> Path | None:
        """The photo's thumbnail (made from the file the first time: slow, so the screens call it on the
        thumbnail worker's thread); None when this tablet has neither the file nor a thumbnail from camp."""
        return thumbnail_if_kept(self.folder, photo.sha256)

    def newest(self, subject_id: uuid.UUID) -> tuple[Photo, Path | None] | None:
        """The newest photo of a find or unit and its thumbnail (None when this tablet lacks the file: a photo
        taken on another tablet); None when it has no photo."""
        photo = self.newest_photo(subject_id)
        return (photo, self.thumbnail_if_kept(photo)) if photo is not None else None

    def file(self, photo: Photo) -> Path:
        return photo_path(self.folder, photo.sha256)

    def line(self, photo: Photo) -> str:
        """One register line: number, subject, facing, who, when."""
        bits = [f"P{photo.number}", photo.caption or photo.subject]
        if photo.facing:
            bits.append(f"facing {photo.facing}")
        bits.append(f"{photo.by} {photo.taken_at:%Y-%m-%d %H:%M}")
        return " · ".join(bits)

    def free_space_line(self) -> str:
        """Free space for photos, with a warning below ``mobile.photos.FREE_SPACE_WARNING_BYTES``."""
        return free_space_line(self.folder)
