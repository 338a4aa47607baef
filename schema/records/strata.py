"""Stratigraphic units (contexts), their relations, horizons, level points and spits."""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Annotated

from pydantic import Field, model_validator

from .. import vocab
from ..fields import Code, Easting, Elevation, Id, Initials, Munsell, Northing, Ref, Timestamp, new_id
from ..validation import FieldError
from ._base import Record, spec

__all__ = [
    "Horizon", "HorizonAssignment", "HorizonAssignmentBase", "HorizonBase", "LevelPoint", "LevelPointBase", "Relation", "RelationBase", "Spit", "SpitBase",
    "Unit", "UnitBase", "SPECS",
]


class HorizonBase(Record):
    """A group of units analysed together; order 1 is the uppermost."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    code: Code
    label: Annotated[str, Field(min_length=1, max_length=120, examples=["Grey tuff marker"])]
    order: Annotated[int, Field(ge=1, description="position from the top, 1 = uppermost")]
    age_min_ka: float | None = Field(default=None, ge=0, allow_inf_nan=False, description="youngest age (ka)")
    age_max_ka: float | None = Field(default=None, ge=0, allow_inf_nan=False, description="oldest age (ka)")
    formation: str | None = Field(default=None, min_length=1, max_length=120,
                                  description="lithostratigraphic formation, if named", examples=["Vellan Formation"])
    member: str | None = Field(default=None, min_length=1, max_length=120,
                               description="lithostratigraphic member, if named", examples=["Upper Member"])
    bed: str | None = Field(default=None, min_length=1, max_length=120,
                            description="lithostratigraphic bed, if named", examples=["Tuff VL-1"])

    @model_validator(mode="after")
    def _age_bracket(self) -> "HorizonBase":
        if self.age_min_ka is not None and self.age_max_ka is not None and self.age_min_ka > self.age_max_ka:
            raise FieldError(
                "age_min_ka", f"age_min_ka {self.age_min_ka:g} is older than age_max_ka {self.age_max_ka:g}",
                "swap the two ages",
            )
        return self


class Horizon(HorizonBase):
    id: Id = Field(default_factory=new_id)


class UnitBase(Record):
    """A stratigraphic unit (context): deposit, fill, cut or structure."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    trench_id: Annotated[uuid.UUID, Ref("trench")]
    code: Code
    kind: vocab.UnitKind
    description: str = Field(default="", max_length=4000)
    munsell: Munsell | None = None
    munsell_condition: vocab.MunsellCondition | None = Field(default=None, description="moist or dry reading")
    texture: vocab.Texture | None = None
    status: vocab.UnitStatus = "open"
    opened_on: dt.date
    closed_on: dt.date | None = None
    recorder: Initials
    horizon_id: Annotated[uuid.UUID | None, Ref("horizon")] = Field(
        default=None, description="horizon assigned by analysts"
    )

    @model_validator(mode="after")
    def _consistent(self) -> "UnitBase":
        if self.munsell is not None and self.munsell_condition is None:
            raise FieldError("munsell_condition", "a Munsell colour is given without its condition", "say whether it was read moist or dry")
        if self.status == "closed" and self.closed_on is None:
            raise FieldError("closed_on", "a closed unit has no closed_on date", "give the date it was closed")
        if self.closed_on is not None and self.closed_on < self.opened_on:
            raise FieldError("closed_on", f"closed_on {self.closed_on} is before opened_on {self.opened_on}", "correct the dates")
        return self


class Unit(UnitBase):
    id: Id = Field(default_factory=new_id)


class RelationBase(Record):
    """An observed relation between two units, stored as seen; the reduced matrix is derived."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    upper_unit_id: Annotated[uuid.UUID, Ref("unit")]
    lower_unit_id: Annotated[uuid.UUID, Ref("unit")]
    kind: vocab.RelationKind
    voided: bool = Field(default=False, description="voided relations are kept but left out of the matrix")
    void_reason: str | None = Field(default=None, max_length=500, description="why the relation was voided",
                                    examples=["recorded the wrong way round; 102 lies under 103"])

    @model_validator(mode="after")
    def _not_self(self) -> "RelationBase":
        if self.upper_unit_id == self.lower_unit_id:
            raise FieldError("lower_unit_id", "a unit cannot be related to itself", "choose two different units")
        if self.voided and not self.void_reason:
            raise FieldError("void_reason", "a voided relation has no void_reason", "say why it was voided")
        return self


class Relation(RelationBase):
    id: Id = Field(default_factory=new_id)


class LevelPointBase(Record):
    """A surveyed point on a unit's top or bottom surface."""

    unit_id: Annotated[uuid.UUID, Ref("unit")]
    surface: vocab.Surface
    e: Easting
    n: Northing
    z: Elevation
    shot_id: Annotated[uuid.UUID | None, Ref("shot")] = None


class LevelPoint(LevelPointBase):
    id: Id = Field(default_factory=new_id)


class SpitBase(Record):
    """An arbitrary excavation level inside a unit, with its sieving record."""

    unit_id: Annotated[uuid.UUID, Ref("unit")]
    number: Annotated[int, Field(ge=1)]
    top_z: Elevation
    bottom_z: Elevation
    area_m2: Annotated[float, Field(gt=0, allow_inf_nan=False, description="excavated area (m2)")]
    sieved_volume_l: float | None = Field(default=None, ge=0, allow_inf_nan=False, description="sieved volume (L)")
    mesh_mm: float | None = Field(default=None, gt=0, allow_inf_nan=False, description="sieve mesh (mm)")
    buckets: Annotated[int, Field(ge=0)] = 0

    @model_validator(mode="after")
    def _top_above_bottom(self) -> "SpitBase":
        if self.bottom_z >= self.top_z:
            raise FieldError("bottom_z", f"bottom_z {self.bottom_z:g} is not below top_z {self.top_z:g}", "swap or re-read them")
        return self


class Spit(SpitBase):
    id: Id = Field(default_factory=new_id)


class HorizonAssignmentBase(Record):
    """One change of a unit's horizon: who put it in which horizon, when and why (the history analysts need)."""

    unit_id: Annotated[uuid.UUID, Ref("unit")]
    horizon_id: Annotated[uuid.UUID | None, Ref("horizon")] = Field(default=None, description="None: taken out")
    assigned_by: Initials
    assigned_at: Timestamp
    note: str = Field(default="", max_length=1000)


class HorizonAssignment(HorizonAssignmentBase):
    id: Id = Field(default_factory=new_id)


SPECS = (
    spec("horizon", HorizonBase, Horizon, unique=(("site_id", "code"),)),
    spec("unit", UnitBase, Unit, unique=(("site_id", "code"),), indexes=(("trench_id",),)),
    spec("relation", RelationBase, Relation, indexes=(("upper_unit_id",), ("lower_unit_id",))),
    spec("level_point", LevelPointBase, LevelPoint, indexes=(("unit_id",),)),
    spec("spit", SpitBase, Spit, unique=(("unit_id", "number"),)),
    spec("horizon_assignment", HorizonAssignmentBase, HorizonAssignment, indexes=(("unit_id",),)),
)
