"""Age determinations: a date on a unit, from a sample or a correlated marker bed, with its uncertainty."""

from __future__ import annotations

import uuid
from typing import Annotated, Literal

from pydantic import Field

from ..fields import Id, Ref, new_id
from ._base import Record, spec

__all__ = ["AgeDetermination", "AgeDeterminationBase", "SPECS"]

DatingMethod = Literal["radiocarbon", "argon_argon", "luminescence", "tephra_correlation", "uranium_series", "other"]


class AgeDeterminationBase(Record):
    """An age for a unit in thousands of years (ka) with its one-sigma uncertainty."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    unit_id: Annotated[uuid.UUID, Ref("unit")]
    find_id: Annotated[uuid.UUID | None, Ref("find")] = Field(default=None, description="the dated sample, if any")
    method: DatingMethod
    age_ka: Annotated[float, Field(ge=0, le=100000, allow_inf_nan=False, description="age in ka", examples=[1.87])]
    sigma_ka: Annotated[float, Field(gt=0, le=10000, allow_inf_nan=False, description="one-sigma uncertainty (ka)")]
    lab_code: str | None = Field(default=None, max_length=60, description="the laboratory's sample code")
    note: str = Field(default="", max_length=1000)


class AgeDetermination(AgeDeterminationBase):
    id: Id = Field(default_factory=new_id)


SPECS = (spec("age_determination", AgeDeterminationBase, AgeDetermination, indexes=(("unit_id",),)),)
