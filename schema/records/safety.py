"""Safety checks the tablet asks for and records: the shoring check at depth, possible human remains, the
instrument's laser class, heat. Baulk records that the question was asked and what the recorder answered; it
never declares a trench safe or a find handled correctly: local rules and licensed people decide that."""

from __future__ import annotations

import uuid
from typing import Annotated, Literal, get_args

from pydantic import Field, model_validator

from ..fields import Id, Initials, Ref, Timestamp, new_id
from ..validation import FieldError
from ._base import Record, spec

__all__ = ["KIND_LABELS", "SAFETY_KINDS", "SafetyCheck", "SafetyCheckBase", "SafetyKind", "SPECS"]

SafetyKind = Literal["shoring", "human_remains", "laser", "heat"]
SAFETY_KINDS: tuple[str, ...] = get_args(SafetyKind)

# what each kind is called where people read it (the camp pages, reports)
KIND_LABELS: dict[str, str] = {
    "shoring": "shoring check",
    "human_remains": "possible human remains",
    "laser": "total station laser",
    "heat": "heat",
}


class SafetyCheckBase(Record):
    """One caution shown on the tablet and the recorder's answer to it."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    trench_id: Annotated[uuid.UUID | None, Ref("trench")] = None
    unit_id: Annotated[uuid.UUID | None, Ref("unit")] = None
    find_id: Annotated[uuid.UUID | None, Ref("find")] = Field(default=None, description="the find it concerns, if any")
    kind: SafetyKind
    depth_m: float | None = Field(default=None, ge=0, le=100, allow_inf_nan=False,
                                  description="depth below the trench's ground surface that set the check off (m)")
    answer: Annotated[str, Field(min_length=1, max_length=500, description="what the recorder answered",
                                 examples=["sides stepped back (benched) on the east face; supervisor JT checked"])]
    notified: str | None = Field(default=None, max_length=300,
                                 description="who was told (human remains: names or roles, and when)")
    recorder: Initials
    checked_at: Timestamp

    @model_validator(mode="after")
    def _who_was_told(self) -> "SafetyCheckBase":
        if self.kind == "human_remains" and not (self.notified or "").strip():
            raise FieldError("notified", "possible human remains were recorded without saying who was told",
                             "write who was notified (site director, authorities as local law requires)")
        return self


class SafetyCheck(SafetyCheckBase):
    id: Id = Field(default_factory=new_id)


SPECS = (spec("safety_check", SafetyCheckBase, SafetyCheck, indexes=(("trench_id",),)),)
