"""Photos: the photo register entry for one picture (what it shows, facing which way, who took it when).

The image's bytes are not in the record: they are named by their SHA-256 and travel apart from the versions
(DESIGN.md section 3, "Photos"). Photo numbers come from the taking tablet's own sequence, so ``(device_id,
number)`` names a photo in the register without any coordination between tablets.
"""

from __future__ import annotations

import uuid
from typing import Annotated, Literal, get_args

from pydantic import Field, model_validator

from ..fields import MAX_JSON_INT, Id, Initials, Ref, Sha256Hex, Timestamp, new_id
from ..validation import FieldError
from ._base import Record, spec

__all__ = ["FACINGS", "MAX_PHOTO_BYTES", "MAX_PHOTO_PIXELS", "PHOTO_SUBJECTS", "Photo", "PhotoBase", "PhotoFacing",
           "PhotoSubject", "SPECS"]

PhotoSubject = Literal["find", "unit", "trench", "level", "day"]
PHOTO_SUBJECTS: tuple[str, ...] = get_args(PhotoSubject)

# The direction the camera faces, as photo registers write it: the eight compass points, or straight down
# for a plan (vertical) shot (common practice, no source).
PhotoFacing = Literal["N", "NE", "E", "SE", "S", "SW", "W", "NW", "down"]
FACINGS: tuple[str, ...] = get_args(PhotoFacing)

MAX_PHOTO_BYTES = 64 * 1024 * 1024
"""The largest photo file Baulk keeps (64 MiB: a raw-ish 50 MP JPEG fits)."""
MAX_PHOTO_PIXELS = 120_000_000
"""The most pixels a kept photo may have (a 200-megapixel image is refused: it would not open on a tablet)."""


class PhotoBase(Record):
    """One photo in the register: its file's hash, what it shows, and how it was taken."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    sha256: Annotated[Sha256Hex, Field(description="SHA-256 of the image file (64 lower-case hex digits)")]
    number: Annotated[int, Field(ge=1, le=MAX_JSON_INT, description="photo number from the taking tablet's own "
                                 "sequence (with the device, it names the photo in the register)")]
    device_id: uuid.UUID | None = Field(default=None, description="the tablet that took the photo and numbered it")
    subject: Annotated[PhotoSubject, Field(description="what the photo shows: a find, a unit, a trench, a level "
                                           "(a unit's surface) or the day's work")]
    subject_id: uuid.UUID | None = Field(default=None, description="the find, unit or trench shown (none for the day)")
    trench_id: Annotated[uuid.UUID | None, Ref("trench")] = Field(default=None,
                                                                   description="the trench it was taken in")
    caption: str = Field(default="", max_length=500, description="what the photo shows, in words",
                         examples=["find 1203 in place, before lifting"])
    facing: PhotoFacing | None = Field(default=None, description="the direction the camera faces (N ... NW, or "
                                       "down for a plan shot)", examples=["N"])
    scale_in_frame: bool = Field(default=False, description="a scale bar is in the frame")
    north_arrow_in_frame: bool = Field(default=False, description="a north arrow is in the frame")
    taken_at: Timestamp
    by: Initials
    width_px: Annotated[int, Field(ge=1, le=100_000, description="image width in pixels")]
    height_px: Annotated[int, Field(ge=1, le=100_000, description="image height in pixels")]
    bytes: Annotated[int, Field(ge=1, le=MAX_PHOTO_BYTES, description="size of the image file in bytes")]
    voided: bool = False
    void_reason: str | None = Field(default=None, max_length=500)

    @model_validator(mode="after")
    def _consistent(self) -> "PhotoBase":
        if self.subject == "day" and self.subject_id is not None:
            raise FieldError("subject_id", "a photo of the day names no find, unit or trench",
                             "leave subject_id empty, or choose the subject it shows")
        if self.subject != "day" and self.subject_id is None:
            raise FieldError("subject_id", f"a photo of a {self.subject} must name which {self.subject} it shows",
                             f"give the {self.subject}'s id")
        if self.width_px * self.height_px > MAX_PHOTO_PIXELS:
            raise FieldError("width_px", f"the image has {self.width_px} x {self.height_px} pixels, more than "
                             f"{MAX_PHOTO_PIXELS // 1_000_000} megapixels",
                             "take the photo at a lower resolution")
        if self.voided and not (self.void_reason or "").strip():
            raise FieldError("void_reason", "a voided photo needs a reason", "say why the photo is voided")
        return self


class Photo(PhotoBase):
    id: Id = Field(default_factory=new_id)


SPECS = (spec("photo", PhotoBase, Photo, indexes=(("sha256",), ("subject_id",), ("device_id", "number"))),)
