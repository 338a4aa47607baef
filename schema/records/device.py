"""Devices (tablets and laptops enrolled with a camp server) and the find-number blocks they are issued."""

from __future__ import annotations

import uuid
from typing import Annotated

from pydantic import BaseModel, Field, model_validator

from .. import vocab
from ..fields import Id, Ref, Sha256Hex, Timestamp, new_id
from ..validation import FieldError
from ._base import STRICT, Record, spec

__all__ = ["Device", "DeviceBase", "DevicePublic", "NumberBlock", "NumberBlockBase", "SPECS"]


class DeviceBase(Record):
    """What a data manager says about a device when enrolling it."""

    label: Annotated[str, Field(min_length=1, max_length=60, examples=["TAB-1"])]
    role: vocab.Role


class Device(DeviceBase):
    """A stored device. ``token_hash`` is the SHA-256 of its token; the token itself is never stored."""

    id: Id = Field(default_factory=new_id)
    token_hash: Sha256Hex | None = None
    enrolled_at: Timestamp | None = None
    last_seen_at: Timestamp | None = None
    revoked_at: Timestamp | None = None


class DevicePublic(BaseModel):
    """A device as shown to a manager: everything but the token hash."""

    model_config = STRICT
    id: uuid.UUID
    label: str
    role: vocab.Role
    enrolled_at: Timestamp | None = None
    last_seen_at: Timestamp | None = None
    revoked_at: Timestamp | None = None


class NumberBlockBase(Record):
    """A block of find numbers [first, last] issued to one device; never reissued."""

    device_id: Annotated[uuid.UUID, Ref("device")]
    first: Annotated[int, Field(ge=1)]
    last: Annotated[int, Field(ge=1)]
    issued_at: Timestamp

    @model_validator(mode="after")
    def _ordered(self) -> "NumberBlockBase":
        if self.last < self.first:
            raise FieldError("last", f"last {self.last} is below first {self.first}", "a block runs upwards: swap them")
        return self

    def __contains__(self, number: object) -> bool:
        return isinstance(number, int) and self.first <= number <= self.last

    @property
    def size(self) -> int:
        return self.last - self.first + 1


class NumberBlock(NumberBlockBase):
    id: Id = Field(default_factory=new_id)


SPECS = (
    spec("device", DeviceBase, Device, public=DevicePublic, unique=(("label",),)),
    spec("number_block", NumberBlockBase, NumberBlock, unique=(("first",),), indexes=(("device_id",),)),
)
