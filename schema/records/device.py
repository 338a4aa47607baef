"""Devices (tablets and laptops enrolled with a camp server) and the find-number blocks they are issued."""

from __future__ import annotations

import re
import uuid
from typing import Annotated

from pydantic import BaseModel, Field, model_validator

from .. import vocab
from ..fields import Id, Ref, Sha256Hex, Timestamp, new_id
from ..validation import FieldError
from ._base import STRICT, Record, spec

__all__ = ["Device", "DeviceBase", "DevicePublic", "LABEL_PATTERN", "NumberBlock", "NumberBlockBase", "SPECS",
           "check_label"]

LABEL_MAX = 60
# What a label may not hold: control characters (C0, DEL, C1), invisible characters and direction overrides
# (zero-width spaces and joiners, bidirectional marks and isolates, word joiners, the byte order mark,
# interlinear annotation marks), line and paragraph separators; nor may it be only spaces. The same rule is the
# pattern in the JSON Schema of ``POST /v1/devices`` (so API clients and fuzzers know it; written with explicit
# ranges, which every regex engine reads alike). Unpaired surrogates are refused too (no engine's pattern can
# name them; they cannot be stored as text).
_HIDDEN = r"\u0000-\u001f\u007f-\u009f\u200b-\u200f\u2028-\u202e\u2060-\u206f\ufeff\ufff9-\ufffb"
_SPACES = r" \u00a0\u1680\u2000-\u200a\u202f\u205f\u3000"
LABEL_PATTERN = f"^[^{_HIDDEN}]*[^{_HIDDEN}{_SPACES}][^{_HIDDEN}]*$"
_HIDDEN_CHAR = re.compile(f"[{_HIDDEN}\\ud800-\\udfff]")
_ONLY_SPACES = re.compile(f"[{_SPACES}]*")


def check_label(label: str) -> str:
    """A new device's label as given, or ``RecordInvalid`` naming it: a label is shown on every camp page and in
    the audit trail, so it must be readable text (not empty, not only spaces, no control or invisible
    characters: ``LABEL_PATTERN``) of at most 60 characters."""
    from ..errors import FieldProblem, RecordInvalid

    example = "e.g. TAB-4 or Finds lab laptop"
    problem = None
    bad = _HIDDEN_CHAR.search(label)
    if bad is not None:
        problem = FieldProblem("label", f"the label {label!r} holds U+{ord(bad.group()):04X}, a control or invisible "
                                        "character", f"type the label again with letters, digits, spaces and "
                                                     f"punctuation only, {example}")
    elif _ONLY_SPACES.fullmatch(label):
        problem = FieldProblem("label", f"the label {label!r} is {'only spaces' if label else 'empty'}",
                               f"give the device a label people can read, {example}")
    elif len(label) > LABEL_MAX:
        problem = FieldProblem("label", f"the label {label[:20]!r}... is {len(label)} characters long",
                               f"shorten it to at most {LABEL_MAX} characters, {example}")
    if problem is not None:
        raise RecordInvalid("device", [problem])
    return label


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
