"""Field versions: the unit of sync. Every edit appends one version per changed field; the version set only
grows, so it converges under any delivery order or duplication (DESIGN.md section 3).

A version's id is ``<device>:<sequence>``; ``parents`` are the version ids the editor was looking at (normally
the current winner; a resolution names every current leaf). Values are JSON (the field's JSON form); list-like
fields are add/remove sets: each version adds or removes one item, and a remove names the adds it saw.
"""

from __future__ import annotations

import json
import re
import uuid
from typing import Any, Iterable

from typing import Annotated

from pydantic import AfterValidator, BaseModel, BeforeValidator, ConfigDict, Field

from ..errors import VersionIdMismatch
from .clock import Stamp

__all__ = ["LOCAL_ONLY", "MANAGER_FIELDS", "MANAGER_OWNED", "SERVER_OWNED", "SET_FIELDS", "Version", "batch_hash",
           "check_version_ids", "misnamed", "needs_manager", "version_id"]

# Fields that merge as add/remove sets rather than one value (record name -> field names).
SET_FIELDS: dict[str, frozenset[str]] = {"find": frozenset({"photo_hashes"})}


# Records that never travel as versions: device rows stay where they are written (a tablet knows itself, the
# server keeps the token hashes). Records only the server may change: tablets' versions of them are ignored.
LOCAL_ONLY: frozenset[str] = frozenset({"device"})
SERVER_OWNED: frozenset[str] = frozenset({"device", "number_block"})

# Set-up records and fields only a manager device (or the camp server itself) writes: the site and its grid, seasons,
# trenches, control points, horizons and their assignment to units, laboratory dates and camp corrections. A
# recorder's version of one is refused with a reason in the push answer (DESIGN.md section 2, "Who writes what").
MANAGER_OWNED: frozenset[str] = frozenset({
    "site", "season", "trench", "control_point", "horizon", "horizon_assignment", "age_determination", "correction",
})
# (record, field) pairs of records recorders write whose field is the manager's alone (a unit's horizon).
MANAGER_FIELDS: frozenset[tuple[str, str]] = frozenset({("unit", "horizon_id")})


def needs_manager(record: str, field: str) -> bool:
    """Whether a version of ``record.field`` may come only from a manager device or the server itself."""
    return record in MANAGER_OWNED or (record, field) in MANAGER_FIELDS


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


def misnamed(versions: "Iterable[Version]") -> "Version | None":
    """The first version whose id is not ``<its device>:<its sequence>`` (``version_id``), or None.

    A version's id is its identity on every replica: one whose id named another device's sequence (or another
    sequence of its own device) would make the real version of that id a duplicate, skipped and lost for good.
    """
    for v in versions:
        if v.id != version_id(v.device, v.seq):
            return v
    return None


def check_version_ids(versions: "Iterable[Version]", *, where: str, fix: str) -> None:
    """Refuse the whole lot (``VersionIdMismatch``) if any version's id is not its device and sequence.

    ``where`` names what carried them (``batch 3 of TAB-1``), ``fix`` says what to do, as a sentence."""
    bad = misnamed(versions)
    if bad is not None:
        raise VersionIdMismatch(
            f"{where} holds a version of {bad.record}.{bad.field} of {bad.record} {bad.record_id} named "
            f"{bad.id!r}, but a version's id must be its device and sequence, {version_id(bad.device, bad.seq)!r}; "
            f"nothing of it was applied. {fix}")


def _integral(value: Any) -> Any:
    """A JSON number with nothing after the point (``12.0``) is that integer; anything else is left to strict
    validation (so ``"12"`` and ``true`` are still refused)."""
    return int(value) if isinstance(value, float) and value.is_integer() else value


_UNPRINTABLE = re.compile("[\x00-\x1f\ud800-\udfff]")


def _printable(value: str) -> str:
    if _UNPRINTABLE.search(value):
        raise ValueError("control characters and unpaired surrogates are not allowed here")
    return value


Whole = Annotated[int, BeforeValidator(_integral)]
# the check, and the same rule stated in the JSON Schema (so API clients and fuzzers know it)
Name = Annotated[str, AfterValidator(_printable),
                 Field(json_schema_extra={"pattern": "^[^\\u0000-\\u001f]*$"})]
_MAX = 2**53 - 1  # the largest integer every JSON reader keeps exactly


class Version(BaseModel):
    """One field's value as set by one edit on one device."""

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)

    id: Name = Field(min_length=3, max_length=80, description="<device uuid>:<device sequence>")
    record: Name = Field(min_length=1, max_length=40, description="record type, e.g. 'find'")
    record_id: uuid.UUID
    field: Name = Field(min_length=1, max_length=60)
    value: Any = Field(description="the field's JSON value; for set fields {'op': 'add'|'remove', 'item': ...}")
    wall_ms: Whole = Field(ge=0, le=_MAX, description="hybrid logical clock: milliseconds")
    counter: Whole = Field(ge=0, le=_MAX, description="hybrid logical clock: counter")
    device: uuid.UUID
    seq: Whole = Field(ge=1, le=_MAX, description="the device's own sequence number")
    parents: tuple[Annotated[Name, Field(max_length=80)], ...] = Field(default=(), max_length=10_000)
    schema_version: Whole = Field(ge=1, le=10_000, default=1)

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
