"""SQLAlchemy tables derived from the record models (``schema.records.REGISTRY``), shared by tablet and server.

Nothing here is written by hand per record: a column's type, nullability, primary and foreign keys come from
the model field (its annotation and the ``PrimaryKey`` / ``Ref`` markers in ``schema.fields``), unique groups
and indexes from the ``RecordSpec``. Vocabulary fields become strings with a CHECK constraint listing the codes.
"""

from __future__ import annotations

import datetime as dt
import types
import typing
import uuid
from typing import Any, Literal, get_args, get_origin

import sqlalchemy as sa
from pydantic import BaseModel
from pydantic.fields import FieldInfo

from .fields import PrimaryKey, Ref
from .records import REGISTRY, RecordSpec

__all__ = ["NAMING", "UTCDateTime", "build_metadata", "metadata", "table_for"]

NAMING = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class UTCDateTime(sa.TypeDecorator[dt.datetime]):
    """A timezone-aware datetime stored as UTC; read back aware (SQLite keeps no zone of its own)."""

    impl = sa.DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError(f"datetime {value.isoformat()} has no time zone; give one, e.g. +00:00")
        value = value.astimezone(dt.timezone.utc)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=dt.timezone.utc)
        return value.astimezone(dt.timezone.utc)


def _unwrap_optional(tp: Any) -> tuple[Any, bool]:
    origin = get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in get_args(tp) if a is not type(None)]
        if len(args) == 1:
            return args[0], True
    return tp, False


def _strip_annotated(tp: Any) -> tuple[Any, list[Any]]:
    extra: list[Any] = []
    while get_origin(tp) is typing.Annotated:
        args = get_args(tp)
        tp, extra = args[0], extra + list(args[1:])
    return tp, extra


def _sql_type(tp: Any, table: str, column: str) -> sa.types.TypeEngine[Any]:
    if get_origin(tp) is Literal:
        return sa.Enum(*get_args(tp), native_enum=False, create_constraint=True, length=32, name=column)
    if tp is uuid.UUID:
        return sa.Uuid()
    if tp is bool:
        return sa.Boolean(create_constraint=False)
    if tp is int:
        return sa.BigInteger()
    if tp is float:
        return sa.Double()
    if tp is str:
        return sa.String()
    if tp is dt.datetime:
        return UTCDateTime()
    if tp is dt.date:
        return sa.Date()
    if get_origin(tp) in (list, dict, tuple) or (isinstance(tp, type) and issubclass(tp, BaseModel)):
        return sa.JSON()
    raise TypeError(f"{table}.{column}: no SQL type for {tp!r}; add one to schema.tables._sql_type")


def _column(table: str, name: str, info: FieldInfo) -> sa.Column[Any]:
    tp, optional = _unwrap_optional(info.annotation)
    tp, inner_meta = _strip_annotated(tp)
    if get_origin(tp) is typing.Union or get_origin(tp) is types.UnionType:
        tp, opt2 = _unwrap_optional(tp)
        optional = optional or opt2
    meta = list(info.metadata) + inner_meta
    if tp is dt.datetime or getattr(tp, "__name__", "") == "AwareDatetime":
        tp = dt.datetime
    args: list[Any] = []
    for m in meta:
        if isinstance(m, Ref):
            args.append(sa.ForeignKey(f"{m.table}.{m.column}", ondelete=m.on_delete))
    primary = any(isinstance(m, PrimaryKey) for m in meta)
    return sa.Column(
        name, _sql_type(tp, table, name), *args, primary_key=primary, nullable=optional and not primary,
        comment=info.description,
    )


def table_for(spec: RecordSpec, md: sa.MetaData) -> sa.Table:
    """The SQL table of one record type, derived from its model and spec."""
    fields = spec.model.model_fields
    names = [spec.key] + [n for n in fields if n != spec.key]
    cols = [_column(spec.name, n, fields[n]) for n in names]
    constraints: list[Any] = [sa.UniqueConstraint(*group) for group in spec.unique]
    doc = (spec.model.__doc__ or spec.base.__doc__ or spec.name).strip().splitlines()[0]
    table = sa.Table(spec.name, md, *cols, *constraints, comment=doc)
    for group in spec.indexes:
        sa.Index(None, *(table.c[c] for c in group))
    return table


def build_metadata() -> sa.MetaData:
    """A fresh MetaData holding every record table."""
    md = sa.MetaData(naming_convention=NAMING)
    for spec in REGISTRY.values():
        table_for(spec, md)
    _covering_indexes(md)
    return md


def _covering_indexes(md: sa.MetaData) -> None:
    """Indexes that hold every column a hot query reads, so it never touches the table itself.

    ``ix_find_tally`` serves the per-horizon tallies of the exports (``sync_server/export_sql.py``): grouped by
    unit, category, material and recovery in index order, voided finds skipped, count and weight summed. It is
    kept narrow on purpose (each byte of an entry is read a million times): the site is known from the unit.
    """
    f = md.tables["find"]
    sa.Index("ix_find_tally", *(f.c[c] for c in ("unit_id", "category", "material", "recovery", "voided", "count",
                                                 "weight_g")))


metadata = build_metadata()
