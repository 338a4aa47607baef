"""Database helpers shared by the tablet and server stores.

The stores own their engines and transactions; this module only knows how a record becomes a row and back,
how to open a SQLite file with Baulk's durability settings, and how to turn an integrity failure into an error
that names the field and the fix. Every function that touches a database takes the ``Connection`` to use.
"""

from __future__ import annotations

import uuid
from pathlib import Path
from typing import Any, Iterator, TypeVar

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from .errors import DuplicateRecord, RecordNotFound
from .fields import Ref
from .records import REGISTRY, Record, RecordSpec, spec_for
from .tables import metadata

__all__ = [
    "not_sqlite",
    "SQLITE_PRAGMAS", "count", "from_row", "get", "insert", "select", "sqlite_engine", "to_row", "update",
]

R = TypeVar("R", bound=Record)

# Durability settings of every Baulk SQLite file (DESIGN.md section 3, "Durability").
SQLITE_PRAGMAS = (
    ("journal_mode", "WAL"),
    ("synchronous", "FULL"),
    ("foreign_keys", "ON"),
    ("busy_timeout", "10000"),
)


def not_sqlite(path: Path | str) -> bool:
    """Whether SQLite itself calls the file at ``path`` not a database (an empty file is an empty database).

    SQLite reads the header (a read-only, immutable connection), never Python: closing any descriptor on a file
    drops every POSIX lock the process holds on it, so an ``open()``/``close()`` of a store while another
    connection of the same process has it open releases that connection's locks; the next connection to close
    then takes itself for the last, copies its write-ahead log back and deletes it under a living writer. SQLite's
    own file layer keeps such a descriptor open until the process's last lock is gone. Source: "How To Corrupt An
    SQLite Database File", section 2.2, sqlite.org/howtocorrupt.html."""
    import sqlite3
    from urllib.parse import quote

    try:
        conn = sqlite3.connect(f"file:{quote(str(Path(path).absolute()))}?mode=ro&immutable=1", uri=True)
        try:
            conn.execute("PRAGMA schema_version").fetchone()
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        return getattr(exc, "sqlite_errorname", "") == "SQLITE_NOTADB"
    return False


def sqlite_engine(path: Path | str, *, pragmas: tuple[tuple[str, str], ...] = (), **kwargs: Any) -> Engine:
    """An engine on a SQLite file: WAL, synchronous=FULL, foreign keys on, writes begin IMMEDIATE.

    pysqlite's own transaction handling is switched off (``isolation_level=None``) and SQLAlchemy emits BEGIN
    itself, the recipe in SQLAlchemy's SQLite dialect documentation ("Serializable isolation / Savepoints /
    Transactional DDL"), so that savepoints nest and writers take the lock at BEGIN instead of mid-transaction.
    A connection with execution option ``baulk_read=True`` begins a deferred (read) transaction instead.
    ``pragmas`` are set after Baulk's own (a store's tuning; durability is never weakened by them).
    """
    engine = sa.create_engine(f"sqlite:///{Path(path)}", **kwargs)

    @sa.event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        for name, value in (*SQLITE_PRAGMAS, *pragmas):
            cur.execute(f"PRAGMA {name}={value}")
        cur.close()

    @sa.event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        read = conn.get_execution_options().get("baulk_read", False)
        conn.exec_driver_sql("BEGIN" if read else "BEGIN IMMEDIATE")

    return engine


def table(spec: RecordSpec) -> sa.Table:
    return metadata.tables[spec.name]


def to_row(record: Record) -> dict[str, Any]:
    """The row of a record: Python values for plain columns, JSON-ready values for JSON columns."""
    spec = spec_for(record)
    t = table(spec)
    row = record.model_dump()
    json_cols = [c.name for c in t.columns if isinstance(c.type, sa.JSON)]
    if json_cols:
        dumped = record.model_dump(mode="json", include=set(json_cols))
        row.update(dumped)
    return row


def from_row(spec: RecordSpec, row: Any) -> Record:
    """A record from a row; the row's SQL types are trusted, JSON columns are parsed by the model."""
    return spec.model.model_validate(dict(row._mapping if hasattr(row, "_mapping") else row), strict=False)


def _diagnose(conn: Connection, record: Record, spec: RecordSpec) -> Exception:
    t = table(spec)
    values = record.model_dump()
    for group in spec.unique:
        cond = sa.and_(*(t.c[c] == values[c] for c in group))
        if conn.execute(sa.select(sa.func.count()).select_from(t).where(cond)).scalar():
            shown = ", ".join(f"{c}={values[c]!r}" for c in group if not c.endswith("_id"))
            return DuplicateRecord(
                f"{spec.name} with {shown or 'these keys'} already exists; choose another "
                f"{' / '.join(c for c in group if not c.endswith('_id')) or 'value'} or edit the existing record"
            )
    for name, info in spec.model.model_fields.items():
        ref = next((m for m in _meta(info) if isinstance(m, Ref)), None)
        value = values.get(name)
        if ref is None or value is None:
            continue
        target = metadata.tables[ref.table]
        if not conn.execute(sa.select(target.c[ref.column]).where(target.c[ref.column] == value)).first():
            return RecordNotFound(
                f"{spec.name}.{name} names {ref.table} {value} which is not in this store; "
                f"save the {ref.table} first or pick an existing one"
            )
    return DuplicateRecord(f"{spec.name} {values.get(spec.key)} already exists; edit it instead of adding it again")


def _meta(info: Any) -> list[Any]:
    import typing

    out = list(info.metadata)
    tp = info.annotation
    for arg in typing.get_args(tp) or ():
        out.extend(typing.get_args(arg)[1:] if typing.get_origin(arg) is typing.Annotated else [])
    return out


def insert(conn: Connection, record: Record) -> None:
    """Insert one record; a clash raises ``DuplicateRecord`` or ``RecordNotFound`` and leaves the caller's
    transaction usable (SQLite undoes just the statement; elsewhere the insert runs in a savepoint)."""
    spec = spec_for(record)
    try:
        if conn.dialect.name == "sqlite":  # a failed statement leaves SQLite's transaction usable: no savepoint
            conn.execute(table(spec).insert(), to_row(record))
        else:  # PostgreSQL aborts the whole transaction on an error, so the insert gets a savepoint of its own
            with conn.begin_nested():
                conn.execute(table(spec).insert(), to_row(record))
    except sa.exc.IntegrityError:
        raise _diagnose(conn, record, spec) from None


def update(conn: Connection, record: Record) -> None:
    """Replace a stored record's row by id; ``RecordNotFound`` when the id is unknown."""
    spec = spec_for(record)
    t = table(spec)
    key = getattr(record, spec.key)
    try:
        with conn.begin_nested():
            result = conn.execute(t.update().where(t.c[spec.key] == key), to_row(record))
    except sa.exc.IntegrityError:
        raise _diagnose(conn, record, spec) from None
    if result.rowcount != 1:
        raise RecordNotFound(f"no {spec.name} has id {key}; it may be on another tablet not yet synced")


def get(conn: Connection, model: type[R], record_id: uuid.UUID) -> R:
    """The record of this type and id, or ``RecordNotFound``."""
    spec = spec_for(model)
    t = table(spec)
    row = conn.execute(sa.select(t).where(t.c[spec.key] == record_id)).first()
    if row is None:
        raise RecordNotFound(f"no {spec.name} has id {record_id}")
    return from_row(spec, row)  # type: ignore[return-value]


def select(conn: Connection, model: type[R], *, order_by: str | None = None, **where: Any) -> Iterator[R]:
    """Records of this type whose columns equal the given values."""
    spec = spec_for(model)
    t = table(spec)
    q = sa.select(t).where(*(t.c[k] == v for k, v in where.items()))
    if order_by:
        q = q.order_by(t.c[order_by])
    for row in conn.execute(q):
        yield from_row(spec, row)  # type: ignore[misc]


def count(conn: Connection, model: type[Record], **where: Any) -> int:
    """How many records of this type match."""
    t = table(spec_for(model))
    q = sa.select(sa.func.count()).select_from(t).where(*(t.c[k] == v for k, v in where.items()))
    return int(conn.execute(q).scalar_one())


def record_names() -> list[str]:
    """Every record name, in dependency order (referenced tables first)."""
    return [t.name for t in metadata.sorted_tables if t.name in REGISTRY]
