"""The base of every record model and the helpers that derive a record's family.

A record is written once as two classes: ``XBase`` (the fields a person edits, with every validator) and ``X``
(the stored record: ``XBase`` plus its id and any fields the system owns). From those, ``derive_create`` and
``derive_update`` make ``XCreate`` (the id may come from the client) and ``XUpdate`` (every field optional, for
a partial edit). The SQL table (``schema.tables``) and the JSON Schema files (``schema.jsonschema``) derive from
``X``. ``RecordSpec`` collects what the table needs beyond the fields: unique groups and indexes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any, ClassVar, Optional

from pydantic import BaseModel, ConfigDict, Field, create_model

__all__ = ["Record", "RecordSpec", "derive_create", "derive_update", "spec"]

STRICT = ConfigDict(strict=True, extra="forbid", frozen=False, validate_default=True)


class Record(BaseModel):
    """Base of all record models: strict types, unknown fields refused."""

    model_config = STRICT
    record_name: ClassVar[str] = ""


def _annotated(info: Any) -> Any:
    if info.metadata:
        return Annotated[(info.annotation, *info.metadata)]  # type: ignore[return-value]
    return info.annotation


def derive_update(base: type[BaseModel], name: str) -> type[BaseModel]:
    """A partial-edit model: every field of ``base`` optional, defaults ``None``, same per-field checks."""
    fields: dict[str, Any] = {}
    for fname, info in base.model_fields.items():
        fields[fname] = (Optional[_annotated(info)], Field(default=None, description=info.description))
    model = create_model(name, __config__=STRICT, **fields)
    model.__doc__ = f"Partial edit of a {base.__name__.removesuffix('Base').lower()}: only the fields given change."
    return model


def derive_create(base: type[BaseModel], name: str) -> type[BaseModel]:
    """A create model: ``base`` plus an optional client-minted id (the tablet makes ids offline)."""
    import uuid

    model = create_model(
        name,
        __base__=base,
        id=(Optional[uuid.UUID], Field(default=None, description="client-minted id; minted here when absent")),
    )
    model.__doc__ = f"What a client sends to create a {base.__name__.removesuffix('Base').lower()}."
    return model


@dataclass(frozen=True)
class RecordSpec:
    """One record type: its name (the table name), its models and its table-level constraints."""

    name: str
    model: type[Record]
    base: type[BaseModel]
    create: type[BaseModel]
    update: type[BaseModel]
    public: type[BaseModel]
    unique: tuple[tuple[str, ...], ...] = ()
    indexes: tuple[tuple[str, ...], ...] = ()
    key: str = "id"


def spec(
    name: str,
    base: type[BaseModel],
    model: type[Record],
    *,
    public: type[BaseModel] | None = None,
    unique: tuple[tuple[str, ...], ...] = (),
    indexes: tuple[tuple[str, ...], ...] = (),
    key: str = "id",
) -> RecordSpec:
    """Build a record's family (create and update models derived from ``base``) and its table spec."""
    stem = base.__name__.removesuffix("Base")
    model.record_name = name
    return RecordSpec(
        name=name,
        model=model,
        base=base,
        create=derive_create(base, f"{stem}Create"),
        update=derive_update(base, f"{stem}Update"),
        public=public or model,
        unique=unique,
        indexes=indexes,
        key=key,
    )
