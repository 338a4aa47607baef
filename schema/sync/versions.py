"""Field versions: the unit of sync. Every edit appends one version per changed field; the version set only
grows, so it converges under any delivery order or duplication (DESIGN.md section 3).

A version's id is ``<device>:<sequence>``; ``parents`` are the version ids the editor was looking at (normally
the current winner; a resolution names every current leaf). Values are JSON (the field's JSON form); list-like
fields are add/remove sets: each version adds or removes one item, and a remove names the adds it saw.
"""

from __future__ import annotations

import json
import uuid
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from .clock import Stamp

__all__ = ["LOCAL_ONLY", "SERVER_OWNED", "SET_FIELDS", "Version", "batch_hash", "version_id"]

# Fields that merge as add/remove sets rather than one value (record name -> field names).
SET_FIELDS: dict[str, frozenset[str]] = {"find": frozenset({"photo_hashes"})}


# Records that never travel as versions: device rows stay where they are written (a tablet knows itself, the
# server keeps the token hashes). Records only the server may change: tablets' versions of them are ignored.
LOCAL_ONLY: frozenset[str] = frozenset({"device"})
SERVER_OWNED: frozenset[str] = frozenset({"device", "number_block"})


_CANONICAL = json.JSONEncoder(sort_keys=True, separators=(",", ":"))  # one encoder, reused
_quote = json.encoder.encode_basestring_ascii  # type: ignore[attr-defined]


def _json_value(value: Any) -> str:
    """``_CANONICAL.encode(value)``, with the common scalars done directly."""
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    t = type(value)
    if t is str:
        return _quote(value)
    if t is int:
        return int.__repr__(value)
    return _CANONICAL.encode(value)


def batch_hash(versions: "list[Version]") -> str:
    """SHA-256 over the versions' canonical JSON, one per line, in the order sent."""
    import hashlib

    h = hashlib.sha256()
    for v in versions:
        h.update(v.canonical().encode())
        h.update(b"\n")
    return h.hexdigest()


def version_id(device: uuid.UUID, seq: int) -> str:
    return f"{device}:{seq}"


class Version(BaseModel):
    """One field's value as set by one edit on one device."""

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)

    id: str = Field(description="<device uuid>:<device sequence>")
    record: str = Field(description="record type, e.g. 'find'")
    record_id: uuid.UUID
    field: str
    value: Any = Field(description="the field's JSON value; for set fields {'op': 'add'|'remove', 'item': ...}")
    wall_ms: int = Field(ge=0, description="hybrid logical clock: milliseconds")
    counter: int = Field(ge=0, description="hybrid logical clock: counter")
    device: uuid.UUID
    seq: int = Field(ge=1, description="the device's own sequence number")
    parents: tuple[str, ...] = ()
    schema_version: int = Field(ge=1, default=1)

    @property
    def stamp(self) -> Stamp:
        return Stamp(self.wall_ms, self.counter)

    @property
    def order_key(self) -> tuple[int, int, str]:
        """The winner is the highest leaf by (stamp, device id), the same on every replica."""
        return (self.wall_ms, self.counter, str(self.device))

    def canonical(self) -> str:
        """The version as canonical JSON (for batch hashes): its JSON form with keys sorted and no spaces, the
        text ``json.dumps(self.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))`` gives
        (``tests/schema/sync/test_versions.py`` holds it to that), assembled piece by piece because pushes hash
        tens of thousands of versions."""
        q = _quote
        return (f'{{"counter":{self.counter},"device":"{self.device}","field":{q(self.field)},"id":{q(self.id)},'
                f'"parents":[{",".join(q(p) for p in self.parents)}],"record":{q(self.record)},'
                f'"record_id":"{self.record_id}","schema_version":{self.schema_version},"seq":{self.seq},'
                f'"value":{_json_value(self.value)},"wall_ms":{self.wall_ms}}}')
