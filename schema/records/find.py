"""Finds (artifacts, fossils, samples) and the extra details a sample carries."""

from __future__ import annotations

import uuid
from typing import Annotated, Any

from pydantic import Field, ValidationInfo, model_validator

from .. import vocab
from ..fields import MAX_JSON_INT, Easting, Elevation, Id, Initials, Northing, Ref, Sha256Hex, Timestamp, new_id
from ..validation import FieldError
from ._base import Record, spec

__all__ = ["Find", "FindBase", "Sample", "SampleBase", "SPECS"]

_Len = Annotated[float, Field(gt=0, le=5000, allow_inf_nan=False)]


class FindBase(Record):
    """A find: what it is, where it came from (unit, spit, position) and who recorded it when.

    Validation context: pass ``{"number_blocks": [NumberBlock, ...]}`` to check the number lies in a block
    issued to the recording device.
    """

    number: Annotated[int, Field(ge=1, le=MAX_JSON_INT,
                                 description="site-unique find number from the device's number block")]
    site_id: Annotated[uuid.UUID, Ref("site")]
    season_id: Annotated[uuid.UUID, Ref("season")]
    trench_id: Annotated[uuid.UUID, Ref("trench")]
    unit_id: Annotated[uuid.UUID, Ref("unit")]
    spit_id: Annotated[uuid.UUID | None, Ref("spit")] = None
    device_id: uuid.UUID | None = Field(default=None, description="device that minted the number")
    category: vocab.Category
    material: Annotated[str, Field(description="material from the category's vocabulary", examples=["obsidian"])]
    taxon: str | None = Field(default=None, max_length=200, description="lowest taxon identified (fossils)")
    element: str | None = Field(default=None, max_length=200, description="skeletal element (fossils)")
    count: Annotated[int, Field(ge=1, le=100000)] = 1
    weight_g: float | None = Field(default=None, gt=0, allow_inf_nan=False, description="weight (g)")
    length_mm: _Len | None = None
    width_mm: _Len | None = None
    thickness_mm: _Len | None = None
    bearing_deg: float | None = Field(
        default=None, ge=0, lt=360, allow_inf_nan=False, description="bearing of the long axis, grid degrees"
    )
    plunge_deg: float | None = Field(
        default=None, ge=0, le=90, allow_inf_nan=False, description="dip of the long axis below horizontal"
    )
    recovery: vocab.FindRecovery
    e: Easting | None = None
    n: Northing | None = None
    z: Elevation | None = None
    position_source: vocab.PositionSource = "none"
    position_sigma_m: float | None = Field(default=None, ge=0, allow_inf_nan=False, description="1-sigma (m)")
    shot_id: Annotated[uuid.UUID | None, Ref("shot")] = None
    gnss_fix_id: Annotated[uuid.UUID | None, Ref("gnss_fix")] = None
    bucket: str | None = Field(default=None, max_length=40, description="sieve bucket label")
    found_at: Timestamp
    recorder: Initials
    notes: str = Field(default="", max_length=4000)
    photo_hashes: list[Sha256Hex] = Field(default_factory=list)
    human_remains: bool = Field(default=False, description="possible human remains: precise location withheld")
    voided: bool = False
    void_reason: str | None = Field(default=None, max_length=500)
    label_printed_at: Timestamp | None = None

    @classmethod
    def allowed_values(cls, field: str, data: dict[str, Any]) -> tuple[str, ...] | None:
        """The values a field may take given the rest of the record: a material from its category's list (used
        by ``check`` when the material is missing, so a sample is never offered an artifact's material)."""
        category = data.get("category")
        if field == "material" and category in vocab.MATERIALS:
            return vocab.materials_for(category)
        return None

    @model_validator(mode="after")
    def _consistent(self, info: ValidationInfo) -> "FindBase":
        allowed = vocab.materials_for(self.category)
        if self.material not in allowed:
            raise FieldError(
                "material",
                f"material {self.material!r} is not in the vocabulary for category {self.category!r}",
                f"use one of: {', '.join(allowed)}",
            )
        if self.category != "fossil" and (self.taxon or self.element):
            raise FieldError("taxon", f"taxon and element are for fossils but this find is of category {self.category!r}", "clear them or change the category")
        coords = (self.e, self.n, self.z)
        if any(c is None for c in coords) and any(c is not None for c in coords):
            raise FieldError("z" if self.z is None else "e", "only some of e, n, z are given", "give all three, or none for an unplotted find")
        has_point = self.e is not None
        if has_point and self.position_source == "none":
            raise FieldError("position_source", "the find has coordinates but position_source is 'none'", "say how they were measured: total_station, gnss or tape")
        if not has_point and self.position_source != "none":
            raise FieldError("e", f"position_source is {self.position_source!r} but e, n, z are missing", "add the coordinates or set position_source to 'none'")
        if self.voided and not self.void_reason:
            raise FieldError("void_reason", "a voided find has no void_reason", "say why it was voided")
        self._check_number(info)
        return self

    def _check_number(self, info: ValidationInfo) -> None:
        blocks = (info.context or {}).get("number_blocks") if info is not None else None
        if blocks is None:
            return
        if not any(self.number in b for b in blocks):
            spans = ", ".join(f"{b.first}-{b.last}" for b in blocks) or "none"
            raise FieldError(
                "number",
                f"find number {self.number} is outside this device's number blocks ({spans})",
                "take the next number from the device, or ask the data manager for a new block",
            )


class Find(FindBase):
    id: Id = Field(default_factory=new_id)


class SampleBase(Record):
    """Extra details of a find of category 'sample'."""

    find_id: Annotated[uuid.UUID, Ref("find")]
    purpose: vocab.SamplePurpose
    volume_l: float | None = Field(default=None, gt=0, allow_inf_nan=False, description="volume taken (L)")
    mass_g: float | None = Field(default=None, gt=0, allow_inf_nan=False, description="mass taken (g)")
    container: Annotated[str, Field(min_length=1, max_length=80, examples=["foil + bag"])]
    oriented: bool = Field(default=False, description="top marked on an oriented block")
    top_z: Elevation | None = None
    bottom_z: Elevation | None = None

    @model_validator(mode="after")
    def _depths(self) -> "SampleBase":
        if self.top_z is not None and self.bottom_z is not None and self.bottom_z > self.top_z:
            raise FieldError("bottom_z", f"bottom_z {self.bottom_z:g} is above top_z {self.top_z:g}", "swap them")
        return self


class Sample(SampleBase):
    id: Id = Field(default_factory=new_id)


SPECS = (
    spec(
        # (site_id, number) is indexed, not unique: numbers come from never-reissued blocks and the tablet refuses
        # a duplicate on save, but a clash arriving by sync or a season import must stay visible (it becomes a
        # ``duplicate_number`` conflict and a NUMBER_DUPLICATE check), not be hidden by the table
        "find", FindBase, Find,
        indexes=(("site_id", "number"), ("device_id", "number"), ("unit_id",), ("trench_id",), ("category",),
                 ("found_at",)),
    ),
    spec("sample", SampleBase, Sample, unique=(("find_id",),)),
)
