"""The version log in a database, shared by the tablet and the server store.

Local edits append versions in the same transaction as the visible row; merged versions (pulled by a tablet,
pushed to the server) are inserted once each (``INSERT ... ON CONFLICT DO NOTHING ... RETURNING``) and the
visible rows of the records they touch are rebuilt from the version set (``materialize``). A row that cannot be
written (a parent not yet here, a clash with a unique value) is kept as a pending row, never dropped; fields
with more than one current value are listed in ``open_conflict``.
"""

from __future__ import annotations

import functools
import json
import uuid
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Iterator

import sqlalchemy as sa
from pydantic import TypeAdapter
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import Connection

from .. import SCHEMA_VERSION, db
from ..records import REGISTRY, Record
from ..tables import metadata
from .clock import Clock, Stamp
from .merge import VOID_FIELD, VersionSet, edit_parents, leaves, merge, void_parents, void_seen
from .tables import field_version, open_conflict, pending_row, sync_state
from .upgrade import upgrade
from .versions import SET_FIELDS, Version, version_id

__all__ = ["WAIT_EDIT", "Identity", "insert_versions", "load_identity", "materialize", "record_versions", "retry_pending",
           "retry_waiting", "row_to_version", "save_identity", "state_get", "state_set", "versions_for_edit", "wait_row",
           "wait_schema"]



# built once: every save reads and writes the identity, and building the statements cost more than running them
_STATE_GET = sa.select(sync_state.c.value).where(sync_state.c.key == sa.bindparam("k"))
_STATE_SET = sync_state.update().where(sync_state.c.key == sa.bindparam("k")).values(value=sa.bindparam("v"))
_IDENTITY_KEYS = ("device", "clock_offset_ms", "hlc_wall", "hlc_counter", "seq")
_IDENTITY_GET = sa.select(sync_state.c.key, sync_state.c.value).where(sync_state.c.key.in_(_IDENTITY_KEYS))


def state_get(conn: Connection, key: str, default: str | None = None) -> str | None:
    row = conn.execute(_STATE_GET, {"k": key}).first()
    return row[0] if row else default


def state_set(conn: Connection, key: str, value: object) -> None:
    done = conn.execute(_STATE_SET, {"k": key, "v": str(value)})
    if done.rowcount == 0:
        conn.execute(sync_state.insert().values(key=key, value=str(value)))


@dataclass
class Identity:
    """This replica: the device id its versions carry, its last sequence number and its clock."""

    device: uuid.UUID
    seq: int
    clock: Clock

    def next(self) -> tuple[int, Stamp]:
        self.seq += 1
        return self.seq, self.clock.tick()


def load_identity(conn: Connection, *, default_device: "Callable[[], uuid.UUID | None] | None" = None) -> Identity:
    """This store's identity (created on first use, from ``default_device()`` when given); the clock adds the
    stored server offset."""
    import time

    state = dict(conn.execute(_IDENTITY_GET).all())
    device = state.get("device")
    if device is None:
        device = str((default_device() if default_device else None) or uuid.uuid4())
        state_set(conn, "device", device)
    offset = int(state.get("clock_offset_ms") or 0)
    clock = Clock(last=Stamp(int(state.get("hlc_wall") or 0), int(state.get("hlc_counter") or 0)),
                  physical=lambda: time.time_ns() // 1_000_000 + offset)
    return Identity(uuid.UUID(device), int(state.get("seq") or 0), clock)


def save_identity(conn: Connection, ident: Identity) -> None:
    values = {"seq": ident.seq, "hlc_wall": ident.clock.last.wall_ms, "hlc_counter": ident.clock.last.counter}
    done = conn.execute(_STATE_SET, [{"k": k, "v": str(v)} for k, v in values.items()])
    if done.rowcount != len(values):  # the first save: some keys are not there yet
        for key, value in values.items():
            state_set(conn, key, value)


def row_to_version(r: Any) -> Version:
    """A ``field_version`` row as a Version (the row was validated on its way in, so it is not checked again)."""
    return Version.model_construct(id=r.id, record=r.record, record_id=r.record_id, field=r.field, value=r.value,
                                   wall_ms=r.wall_ms, counter=r.counter, device=r.device, seq=r.seq,
                                   parents=tuple(r.parents), schema_version=r.schema_version)


def record_versions(conn: Connection, record_ids: Iterable[uuid.UUID]) -> list[Version]:
    ids = list(record_ids)
    out: list[Version] = []
    for i in range(0, len(ids), 500):
        q = sa.select(field_version).where(field_version.c.record_id.in_(ids[i:i + 500]))
        out.extend(row_to_version(r) for r in conn.execute(q))
    return out


def versions_for_edit(conn: Connection, ident: Identity, record: Record, *, new: bool) -> list[Version]:
    """The versions one local save appends: the fields of a new record that differ from the model's default
    (a field no version has set reads as its default, ``_with_defaults``), the changed fields of an edit."""
    name = record.record_name
    values = record.model_dump(mode="json")
    rid = uuid.UUID(values.pop("id"))
    state = VersionSet.of([] if new else record_versions(conn, [rid]))
    sets = SET_FIELDS.get(name, frozenset())
    out: list[Version] = []

    def add(fname: str, value: Any, parents: tuple[str, ...]) -> None:
        seq, stamp = ident.next()
        out.append(Version(id=version_id(ident.device, seq), record=name, record_id=rid, field=fname, value=value,
                           wall_ms=stamp.wall_ms, counter=stamp.counter, device=ident.device, seq=seq,
                           parents=parents, schema_version=SCHEMA_VERSION))

    seen_void = void_seen(state, name, rid)
    void_value = values.pop(VOID_FIELD, None) if VOID_FIELD in values else _ABSENT
    for fname, value in values.items():
        key = (name, rid, fname)
        if fname in sets:
            present = {json.dumps(x, sort_keys=True): x for x in state.value(key) or []}
            wanted = {json.dumps(x, sort_keys=True): x for x in value or []}
            for k in wanted.keys() - present.keys():
                add(fname, {"op": "add", "item": wanted[k]}, seen_void)
            for k in present.keys() - wanted.keys():
                adds = tuple(v.id for v in state.field_versions(key)
                             if v.value.get("op") == "add" and json.dumps(v.value.get("item"), sort_keys=True) == k)
                add(fname, {"op": "remove", "item": present[k]}, adds + seen_void)
            continue
        if not _same(name, fname, _shown(state, key), value):
            add(fname, value, edit_parents(state, key))
    if void_value is not _ABSENT:  # last: a void names everything this save and earlier ones set
        key = (name, rid, VOID_FIELD)
        if not _same(name, VOID_FIELD, _shown(state, key), void_value):
            merge(state, out)
            add(VOID_FIELD, void_value, void_parents(state, name, rid) if void_value is True else edit_parents(state, key))
    return out


_ABSENT = object()
_REQUIRED = object()


def _shown(state: VersionSet, key: tuple[str, uuid.UUID, str]) -> Any:
    """The field's current value: its winner, else its default (a required field with no version: none)."""
    current = leaves(state.field_versions(key))
    if current:
        return current[0].value
    return _default_json(key[0], key[2])


@functools.lru_cache(maxsize=None)
def _default_json(record: str, fname: str) -> Any:
    info = REGISTRY[record].model.model_fields.get(fname)
    if info is None or info.is_required():
        return _REQUIRED
    if fname in SET_FIELDS.get(record, ()):
        return []
    default = info.get_default(call_default_factory=True)
    return TypeAdapter(type(default)).dump_python(default, mode="json") if default is not None else None


def _same(record: str, fname: str, a: Any, b: Any) -> bool:
    """Equal as values of the field (the same instant in two time zones is the same time)."""
    if a == b:
        return True
    adapter = _adapter(record, fname)
    if adapter is None:
        return False
    try:
        return bool(adapter.validate_python(a, strict=False) == adapter.validate_python(b, strict=False))
    except Exception:  # noqa: BLE001 - an undecodable old value is simply different
        return False


@functools.lru_cache(maxsize=4)
def _insert_stmt(dialect_name: str) -> Any:
    dialect = postgresql if dialect_name == "postgresql" else sqlite
    return dialect.insert(field_version).on_conflict_do_nothing(index_elements=["id"]).returning(field_version.c.id)


def insert_versions(conn: Connection, versions: Iterable[Version], *, next_log_seq: int | None = None,
                    batch: int | None = None) -> list[Version]:
    """Insert versions not yet held; returns those that were new. With ``next_log_seq`` (server), new versions
    get consecutive change-log positions from it (the caller holds the change-log lock). Versions written at
    an older schema are stored upgraded (``schema.sync.upgrade``)."""
    unique: dict[str, Version] = {}
    for v in upgrade(versions):
        unique.setdefault(v.id, v)  # collapse the batch to one row per key first
    if not unique:
        return []
    items = list(unique.values())
    added: set[str] = set()
    for i in range(0, len(items), 400):
        chunk = items[i:i + 400]
        # change-log positions go with the insert; a version already held keeps its own (the skipped position
        # is a harmless gap: pulls ask for positions after a cursor, never for a count)
        rows = [{"id": v.id, "record": v.record, "record_id": v.record_id, "field": v.field, "value": v.value,
                 "wall_ms": v.wall_ms, "counter": v.counter, "device": v.device, "seq": v.seq,
                 "parents": list(v.parents), "schema_version": v.schema_version, "batch": batch,
                 "log_seq": None if next_log_seq is None else next_log_seq + i + k} for k, v in enumerate(chunk)]
        added.update(r[0] for r in conn.execute(_insert_stmt(conn.dialect.name), rows))
    return [v for v in items if v.id in added]


@functools.lru_cache(maxsize=None)
def _adapter(record: str, fname: str) -> TypeAdapter[Any] | None:
    info = REGISTRY[record].model.model_fields.get(fname)
    if info is None:
        return None
    meta = tuple(info.metadata)
    from typing import Annotated

    return TypeAdapter(Annotated[(info.annotation, *meta)] if meta else info.annotation)


class _BadValue(Exception):
    """A field value that does not validate as its field (``exc``: the validation error); ``whole``: the values
    are each valid but break a rule across fields (a voided find that says not why)."""

    def __init__(self, field: str, exc: Exception, *, whole: bool = False):
        super().__init__(field)
        self.field, self.exc, self.whole = field, exc, whole


def _row(record: str, values: dict[str, Any], rid: uuid.UUID) -> dict[str, Any]:
    table = metadata.tables[record]
    row: dict[str, Any] = {"id": rid}
    for col in table.columns:
        if col.name == "id" or col.name not in values:
            continue
        value = values[col.name]
        if isinstance(col.type, sa.JSON) or value is None:
            row[col.name] = value
            continue
        adapter = _adapter(record, col.name)
        try:
            row[col.name] = adapter.validate_python(value, strict=False) if adapter else value
            if isinstance(col.type, sa.BigInteger):  # past 2^53 - 1: beyond what JSON and a 64-bit column hold
                row[col.name] = _whole_adapter().validate_python(row[col.name])
        except ValueError as exc:
            raise _BadValue(col.name, exc) from None
    return row


def _check_whole(record: str, row: dict[str, Any]) -> None:
    """The record's rules across fields (``model_validator``s: e, n and z together, a void with its reason, a
    material of the category...), on a row whose fields are each valid: a row breaking one is not written (every
    reader of the table would fail on it) but waits as a pending row, like a bad value."""
    from pydantic import ValidationError

    from ..validation import problems

    model = REGISTRY[record].model
    try:
        model.model_validate(row, strict=False)
    except ValidationError as exc:
        raise _BadValue(problems(model, exc)[0].field, exc, whole=True) from None


@functools.lru_cache(maxsize=1)
def _whole_adapter() -> TypeAdapter[Any]:
    from typing import Annotated

    from pydantic import Field

    from ..fields import MAX_JSON_INT

    return TypeAdapter(Annotated[int, Field(ge=-MAX_JSON_INT, le=MAX_JSON_INT)])


def _with_defaults(record: str, values: dict[str, Any]) -> dict[str, Any]:
    """Fields no version has set yet (an empty set, a field newer than the tablet that made the record) take
    the model's default."""
    out = dict(values)
    for fname, info in REGISTRY[record].model.model_fields.items():
        if fname in out or fname == "id" or info.is_required():
            continue
        default = _default_json(record, fname)
        out[fname] = list(default) if isinstance(default, list) else default
    return out


def _dependency_rank() -> dict[str, int]:
    return {name: i for i, name in enumerate(db.record_names())}


def _chunks(items: list[Any], n: int = 500) -> Iterator[list[Any]]:
    for i in range(0, len(items), n):
        yield items[i:i + n]


def _version_set(conn: Connection, todo: list[tuple[str, uuid.UUID]], known: list[Version]) -> VersionSet:
    """The versions of these records: ``known`` (just inserted) plus, only for records that had versions
    before, what the log holds."""
    ids = [rid for _r, rid in todo]
    if not known:
        return VersionSet.of(record_versions(conn, ids))
    counts: dict[uuid.UUID, int] = {}
    for v in known:
        counts[v.record_id] = counts.get(v.record_id, 0) + 1
    older: list[uuid.UUID] = []
    for chunk in _chunks(ids):
        q = (sa.select(field_version.c.record_id, sa.func.count()).where(field_version.c.record_id.in_(chunk))
             .group_by(field_version.c.record_id))
        older.extend(rid for rid, n in conn.execute(q) if n != counts.get(rid, 0))
    return VersionSet.of([*known, *record_versions(conn, older)])


def materialize(conn: Connection, keys: Iterable[tuple[str, uuid.UUID]], *,
                known: Iterable[Version] = ()) -> dict[str, int]:
    """Rebuild the visible rows of these records from their versions; returns counts of what happened.

    ``known``: versions of these records the caller has just inserted (saves reading them back). Rows are
    written table by table in dependency order, in bulk; a table whose bulk write hits a constraint is redone
    row by row so that only the offending rows become pending.

    A pending row records what it waits for (``pending_row.waits_for``): a missing parent row, the row it clashes
    with, a Baulk that reads a newer schema, or a new value of its own. The pending rows waiting for a row just
    written are tried again at once (and those they unblock in turn), so no call reads pending rows that
    nothing it wrote could unblock.
    """
    stats, written = _materialize_once(conn, keys, list(known))
    more = retry_waiting(conn, written)
    stats["written"] += more["written"]
    for key in ("retried", "number_clashes"):
        if key in more:
            stats[key] = stats.get(key, 0) + more[key]
    return stats


def retry_waiting(conn: Connection, written: Iterable[tuple[str, uuid.UUID]]) -> dict[str, int]:
    """Try again the pending rows waiting for these rows, just written (a parent, a row they clashed with), and
    the rows those unblock in turn; the ``waits_for`` index finds them, so rows waiting for anything else are not
    read at all. ``materialize`` calls it for what it writes; a store calls it for a record it inserts directly."""
    stats = {"written": 0, "retried": 0}
    written = list(written)
    while written:
        waiting = _waiting_for(conn, written)
        if not waiting:
            break
        more, written = _materialize_once(conn, waiting, [])
        stats["written"] += more["written"]
        stats["retried"] += len(waiting)
        if "number_clashes" in more:
            stats["number_clashes"] = stats.get("number_clashes", 0) + more["number_clashes"]
    return stats


def _materialize_once(conn: Connection, keys: Iterable[tuple[str, uuid.UUID]],
                      known: list[Version]) -> tuple[dict[str, int], list[tuple[str, uuid.UUID]]]:
    rank = _dependency_rank()
    todo = sorted(set(keys), key=lambda k: (rank.get(k[0], 99), str(k[1])))
    stats = {"written": 0, "pending": 0}
    by_record = _version_set(conn, todo, known)
    grouped = by_record.records()
    finds = [rid for r, rid in todo if r == "find"]
    numbers = _number_pairs(conn, finds)  # before: a renumbered find may end a clash
    _replace_conflicts(conn, todo, by_record)
    pending: dict[tuple[str, uuid.UUID], tuple[str, str]] = {}
    ready: dict[str, list[dict[str, Any]]] = {}
    for record, rid in todo:
        values = grouped.get((record, rid), {})
        spec = REGISTRY.get(record)
        if spec is None:  # a record type from a newer Baulk: its versions are kept and passed on, not shown
            pending[(record, rid)] = _unknown_record(conn, record, by_record.versions_of(record, rid))
            continue
        missing = [f for f, info in spec.model.model_fields.items() if info.is_required() and f != "id" and f not in values]
        if missing:
            pending[(record, rid)] = (f"waiting for fields: {', '.join(missing)}", WAIT_EDIT)
            continue
        try:
            row = _row(record, _with_defaults(record, values), rid)
            _check_whole(record, row)
            ready.setdefault(record, []).append(row)
        except _BadValue as bad:  # a newer tablet's shape, or a value no Baulk accepts
            pending[(record, rid)] = _bad_value(conn, record, rid, bad, by_record)
    written: list[tuple[str, uuid.UUID]] = []
    for record in sorted(ready, key=lambda r: rank.get(r, 99)):
        ok, failed = _write_rows(conn, metadata.tables[record], ready[record])
        written.extend((record, rid) for rid in ok)
        pending.update({(record, rid): why for rid, why in failed.items()})
    for (record, rid), (why, waits_for) in pending.items():
        _pending(conn, record, rid, why, waits_for)
    for record in {r for r, _ in written}:
        for chunk in _chunks([rid for r, rid in written if r == record]):
            conn.execute(pending_row.delete().where(pending_row.c.record == record, pending_row.c.record_id.in_(chunk)))
    stats["written"], stats["pending"] = len(written), len(pending)
    if finds:
        stats["number_clashes"] = _number_clashes(conn, numbers | _number_pairs(conn, finds))
    return stats, written


# What a pending row waits for (``pending_row.waits_for``): a new value of its own record, a Baulk that reads a
# newer schema, or (``wait_row``) a row of another record: a missing parent, or the row a unique value clashes with.
WAIT_EDIT = "edit"


def wait_schema(n: int) -> str:
    return f"schema:{n}"


def wait_row(record: str, rid: object) -> str:
    return f"{record}:{rid}"


# built once: a local save asks it for every record it inserts
_WAITING = sa.select(pending_row.c.record, pending_row.c.record_id).where(
    pending_row.c.waits_for.in_(sa.bindparam("waits", expanding=True)))


def _waiting_for(conn: Connection, written: list[tuple[str, uuid.UUID]]) -> list[tuple[str, uuid.UUID]]:
    """The pending rows whose wait names one of these rows (found through the ``waits_for`` index)."""
    out: list[tuple[str, uuid.UUID]] = []
    for chunk in _chunks([wait_row(r, rid) for r, rid in written]):
        out.extend((r.record, r.record_id) for r in conn.execute(_WAITING, {"waits": chunk}))
    return out


def _labels(conn: Connection, devices: Iterable[uuid.UUID]) -> dict[uuid.UUID, str]:
    """Device labels this replica knows (the server knows every enrolled device; a tablet only itself)."""
    t = metadata.tables["device"]
    ids = list(set(devices))
    return dict(conn.execute(sa.select(t.c.id, t.c.label).where(t.c.id.in_(ids))).all()) if ids else {}


def _who(conn: Connection, device: uuid.UUID) -> str:
    return _labels(conn, [device]).get(device) or f"device {device}"


def _unknown_record(conn: Connection, record: str, versions: list[Version]) -> tuple[str, str]:
    """Why a record of a type this Baulk does not know is not shown, and the schema it waits for."""
    newest = max((v.schema_version for v in versions), default=SCHEMA_VERSION)
    who = _who(conn, versions[0].device) if versions else "a device"
    if newest > SCHEMA_VERSION:
        return (f"record type {record!r} (sent by {who}, written in schema {newest}) is unknown to this Baulk "
                f"(schema {SCHEMA_VERSION}): update Baulk here", wait_schema(newest))
    return (f"record type {record!r} sent by {who} is not a Baulk record type: its versions say schema {newest}, "
            f"which this Baulk reads, and that schema has no such record. Its versions are kept but never shown; "
            f"ask whoever uses {who} which program wrote them.", wait_schema(SCHEMA_VERSION + 1))


def _bad_value(conn: Connection, record: str, rid: uuid.UUID, bad: "_BadValue", state: VersionSet) -> tuple[str, str]:
    """Why a record with a value this Baulk cannot take is not shown: a newer Baulk's shape (wait for an
    update), or a value that is simply invalid (say which field, who sent it and the fix; wait for a new value)."""
    from ..validation import field_problem

    current = leaves(state.field_versions((record, rid, bad.field)))
    if bad.whole:  # the newest edit of the record broke a rule across its fields
        current = sorted(state.versions_of(record, rid), key=lambda v: v.order_key, reverse=True)
    sent = current[0] if current else None
    problem = field_problem(REGISTRY[record].model, bad.field, bad.exc)
    if sent is not None and sent.schema_version > SCHEMA_VERSION:
        return (f"a value this Baulk cannot read (schema {sent.schema_version}, this Baulk reads {SCHEMA_VERSION}): "
                f"update Baulk here; {bad.field}: {problem.message}", wait_schema(sent.schema_version))
    who = _who(conn, sent.device) if sent is not None else "a device"
    if bad.whole:
        return (f"{record} {rid} is not shown: {problem.message} (its values are each valid but not together; the "
                f"latest edit came from {who}). It is kept here until a valid value arrives. Fix: {problem.fix}, "
                "and sync again.", WAIT_EDIT)
    return (f"{record} {rid} is not shown: {bad.field} sent by {who} is invalid: {problem.message}. It is kept here "
            f"until a valid value arrives. Fix: {problem.fix}, on {who}, and sync again.", WAIT_EDIT)


def _write_rows(conn: Connection, table: sa.Table,
                rows: list[dict[str, Any]]) -> tuple[list[uuid.UUID], dict[uuid.UUID, tuple[str, str]]]:
    """Insert the new rows and update the existing ones; returns (written ids, {refused id: (reason, wait)})."""
    existing: set[uuid.UUID] = set()
    for chunk in _chunks([r["id"] for r in rows]):
        existing.update(conn.execute(sa.select(table.c.id).where(table.c.id.in_(chunk))).scalars())
    inserts = [r for r in rows if r["id"] not in existing]
    updates = [{**{k: v for k, v in r.items() if k != "id"}, "_rid": r["id"]} for r in rows if r["id"] in existing]
    update_stmt = table.update().where(table.c.id == sa.bindparam("_rid"))
    try:
        with conn.begin_nested():
            if inserts:
                conn.execute(table.insert(), inserts)
            for shape in _by_keys(updates):
                conn.execute(update_stmt, shape)
        return [r["id"] for r in rows], {}
    except sa.exc.IntegrityError:
        pass  # find which rows: one at a time
    ok: list[uuid.UUID] = []
    failed: dict[uuid.UUID, tuple[str, str]] = {}
    for r in rows:
        try:
            with conn.begin_nested():
                if r["id"] in existing:
                    conn.execute(table.update().where(table.c.id == r["id"]).values(r))
                else:
                    conn.execute(table.insert().values(r))
            ok.append(r["id"])
        except sa.exc.IntegrityError as exc:
            failed[r["id"]] = _refused_row(conn, table, r, str(exc.orig).splitlines()[0][:300])
    return ok, failed


def _refused_row(conn: Connection, table: sa.Table, row: dict[str, Any], error: str) -> tuple[str, str]:
    """Why the database refused this row, and what it waits for: a parent row not here yet, or the row holding
    the unique value it clashes with (either, once written or changed, lets it be tried again)."""
    for col in table.columns:
        value = row.get(col.name)
        for fk in col.foreign_keys if value is not None else ():
            parent = fk.column.table
            if conn.execute(sa.select(fk.column).where(fk.column == value).limit(1)).first() is None:
                return (f"waiting for {parent.name} {value} (its {col.name}), which has not arrived here yet",
                        wait_row(parent.name, value))
    for unique in (c for c in table.constraints if isinstance(c, sa.UniqueConstraint)):
        cols = list(unique.columns)
        if any(row.get(c.name) is None for c in cols):
            continue
        other = conn.execute(sa.select(table.c.id).where(table.c.id != row["id"], *[c == row[c.name] for c in cols])
                             .limit(1)).scalar()
        if other is not None:
            said = ", ".join(f"{c.name} {row[c.name]!r}" for c in cols)
            return (f"{said} is already used by {table.name} {other} here; the two must be told apart (change one of "
                    "them) before this one can be shown", wait_row(table.name, other))
    return f"refused by the database: {error}", WAIT_EDIT


def _by_keys(rows: list[dict[str, Any]]) -> list[list[dict[str, Any]]]:
    """Rows grouped by their key sets (an executemany needs one shape)."""
    out: dict[tuple[str, ...], list[dict[str, Any]]] = {}
    for r in rows:
        out.setdefault(tuple(sorted(r)), []).append(r)
    return list(out.values())


def _replace_conflicts(conn: Connection, todo: list[tuple[str, uuid.UUID]], state: VersionSet) -> None:
    """The open conflicts of these records, as the version set says now."""
    wanted = set(todo)
    found = [c for c in state.conflicts() if (c.key[0], c.key[1]) in wanted]
    for record in {r for r, _ in todo}:
        for chunk in _chunks([rid for r, rid in todo if r == record]):
            conn.execute(open_conflict.delete().where(open_conflict.c.record == record,
                                                      open_conflict.c.record_id.in_(chunk)))
    if found:
        conn.execute(open_conflict.insert(), [
            {"record": c.key[0], "record_id": c.key[1], "field": c.key[2], "leaves": [v.id for v in c.leaves],
             "kind": c.kind} for c in found])


def _number_pairs(conn: Connection, find_ids: list[uuid.UUID]) -> set[tuple[uuid.UUID, int]]:
    t = metadata.tables["find"]
    out: set[tuple[uuid.UUID, int]] = set()
    for i in range(0, len(find_ids), 500):
        q = sa.select(t.c.site_id, t.c.number).where(t.c.id.in_(find_ids[i:i + 500]))
        out.update((r.site_id, r.number) for r in conn.execute(q))
    return out


def _number_clashes(conn: Connection, pairs: set[tuple[uuid.UUID, int]]) -> int:
    """List finds sharing a site and number as conflicts on ``number`` (kind ``duplicate_number``), each
    naming the number versions of every find in the clash; clear those that no longer clash."""
    t = metadata.tables["find"]
    groups: dict[tuple[uuid.UUID, int], list[uuid.UUID]] = {}
    by_site: dict[uuid.UUID, list[int]] = {}
    for site, number in pairs:
        by_site.setdefault(site, []).append(number)
    for site, numbers in by_site.items():  # site = ? AND number IN (...): the (site_id, number) index serves it
        for chunk in _chunks(sorted(numbers)):
            q = sa.select(t.c.id, t.c.site_id, t.c.number).where(t.c.site_id == site, t.c.number.in_(chunk))
            for r in conn.execute(q):
                groups.setdefault((r.site_id, r.number), []).append(r.id)
    ids = [rid for g in groups.values() for rid in g]
    for i in range(0, len(ids), 500):
        conn.execute(open_conflict.delete().where(open_conflict.c.kind == "duplicate_number",
                                                  open_conflict.c.record == "find",
                                                  open_conflict.c.record_id.in_(ids[i:i + 500])))
    clashing = {k: g for k, g in groups.items() if len(g) > 1}
    if not clashing:
        return 0
    held = VersionSet.of(v for v in record_versions(conn, [rid for g in clashing.values() for rid in g])
                         if v.field == "number")
    busy = {r.record_id for r in conn.execute(sa.select(open_conflict.c.record_id).where(
        open_conflict.c.record == "find", open_conflict.c.field == "number"))}
    for group in clashing.values():
        tops = [w for rid in group if (w := leaves(held.field_versions(("find", rid, "number")))[:1])]
        competing = [w[0].id for w in sorted(tops, key=lambda w: w[0].order_key, reverse=True)]
        for rid in group:
            if rid not in busy:  # a concurrent edit of the number is listed first; the clash shows after
                conn.execute(open_conflict.insert().values(record="find", record_id=rid, field="number",
                                                           leaves=competing, kind="duplicate_number"))
    return len(clashing)


def retry_pending(conn: Connection) -> dict[str, int]:
    """Try again the pending rows whose wait is over without anything arriving: those waiting for a Baulk that
    reads their schema (this one, after an update) and those an older Baulk kept without saying what they wait
    for (once: the retry records their wait). Rows waiting for a parent, a clashing row or a new value of their
    own are retried by ``materialize`` when that arrives, never here, so a sync's cost does not grow with them."""
    due = [wait_schema(n) for n in range(1, SCHEMA_VERSION + 1)]
    q = sa.select(pending_row.c.record, pending_row.c.record_id).where(
        sa.or_(pending_row.c.waits_for.is_(None), pending_row.c.waits_for.in_(due)))
    keys = [(r.record, r.record_id) for r in conn.execute(q)]
    return materialize(conn, keys) if keys else {"written": 0, "pending": 0}


def _pending(conn: Connection, record: str, rid: uuid.UUID, reason: str, waits_for: str) -> None:
    done = conn.execute(pending_row.update().where(pending_row.c.record == record, pending_row.c.record_id == rid)
                        .values(reason=reason, waits_for=waits_for))
    if done.rowcount == 0:
        conn.execute(pending_row.insert().values(record=record, record_id=rid, reason=reason, waits_for=waits_for))


def assign_log_positions(conn: Connection) -> int:
    """Give versions written on this replica (the server's own edits) their change-log positions."""
    todo = conn.execute(sa.select(field_version.c.id).where(field_version.c.log_seq.is_(None))
                        .order_by(field_version.c.wall_ms, field_version.c.counter, field_version.c.seq)).scalars().all()
    if not todo:
        return 0
    top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0
    for n, vid in enumerate(todo, start=1):
        conn.execute(field_version.update().where(field_version.c.id == vid).values(log_seq=top + n))
    return len(todo)
