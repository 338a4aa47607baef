"""Corrections made at camp: who changed which fields of a recorded find or unit, when and why.

The changed values themselves travel as field versions like every edit; this record keeps the reason beside
them, so the audit trail answers "who and why" as well as "what and when".
"""

from __future__ import annotations

import uuid
from typing import Annotated, Literal

from pydantic import Field

from ..fields import Id, Timestamp, new_id
from ._base import Record, spec

__all__ = ["Correction", "CorrectionBase", "CORRECTABLE", "SPECS"]

CORRECTABLE = ("find", "unit")
"""The recorded records a data manager may correct at camp."""


class CorrectionBase(Record):
    """One camp-side correction of a recorded find or unit, with its reason."""

    record: Literal["find", "unit"] = Field(description="which kind of record was corrected")
    record_id: uuid.UUID = Field(description="the corrected record's id")
    fields: Annotated[str, Field(min_length=1, max_length=400, description="the corrected fields, comma-separated",
                                 examples=["unit_id,notes"])]
    reason: Annotated[str, Field(min_length=3, max_length=1000, description="why the record was corrected",
                                 examples=["section drawing shows the piece in 104"])]
    by: Annotated[str, Field(min_length=1, max_length=60, description="who corrected it (initials or device label)",
                             examples=["DM"])]
    at: Timestamp


class Correction(CorrectionBase):
    id: Id = Field(default_factory=new_id)


SPECS = (spec("correction", CorrectionBase, Correction, indexes=(("record_id",),)),)
