"""Rebuilding a lost camp store from the tablets (``baulk recover``).

Every tablet holds a full replica of what it pulled, and its own edits whether sent or not, as field versions
(``field_version``). A camp store lost after its last backup is rebuilt in a new store: the backup first, when one
is given (``sync_server.backup.load_backup``, checked against its sidecar), then each tablet's whole version log,
merged through the server's own merge (``schema.sync.replica.insert_versions`` + ``materialize``, as a season
import merges an archive's log): a version held twice is inserted once, clashes become conflicts, every visible
row is rebuilt from the versions. The tablets' own edits pass the same rules a push applies (set-up records only
from a manager device, find numbers within 2^53 - 1); number blocks and devices are the server's and are not taken
from tablets. The number floor is set above every number in any tablet's blocks and finds, so no number is issued
again. Everything happens in a new store that is put in place only at the end (``backup.new_store``).

Tablet files are read without writing a byte (SQLite read-only and immutable; a file whose write-ahead log has no
shared-memory index is read from a temporary copy, as ``baulk inspect`` does) and checked whole first: a tablet
file, SQLite's integrity check, every version's shape and id.

What cannot come back: devices (the server kept only their token hashes; every device is revoked and every
tablet re-enrols, ``backup.fence``), number blocks issued after the backup (the floor covers their numbers), push
acknowledgements, checks accepted after the backup, and whatever only the lost store held after the backup and
no given tablet pulled (a camp-side edit no tablet synced after, a tablet's push when that tablet is not given).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import shutil
import sqlite3
import tempfile
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator
from urllib.parse import quote

import sqlalchemy as sa
from pydantic import ValidationError

from schema import db
from schema.errors import NotABaulkStore, StoreError
from schema.fields import MAX_JSON_INT
from schema.sync import SERVER_OWNED, Version
from schema.sync.replica import insert_versions, materialize, retry_pending, state_set
from schema.sync.tables import field_version, open_conflict, pending_row, sync_state
from schema.sync.versions import check_version_ids, needs_manager
from schema.tables import metadata

from .backup import fence, load_backup, new_store, read_sidecar
from .store import ServerStore, number_floor

__all__ = ["TabletFile", "read_tablet", "recover_store"]

Progress = Callable[[str], None]
_PAGE = 5000
_TABLET_TABLES = {"baulk_migration", "field_version", "sync_state"}  # a tablet file has them from its first sync


@dataclass
class TabletFile:
    """A tablet file as it was read: who it is, what it holds."""

    path: Path
    device: uuid.UUID | None
    label: str
    role: str
    sites: dict[str, str]  # site id -> code
    versions: int
    own: int  # versions of its own edits
    unacked: int  # of those, not acknowledged by the camp server
    cursor: int  # its pull position in the lost store's change log
    top_number: int  # the highest number in its blocks and finds
    merged: dict[str, Any] = field(default_factory=dict)

    @property
    def name(self) -> str:
        return f"{self.label} ({self.path.name})"


@contextlib.contextmanager
def _reading(path: Path) -> Iterator[sa.Connection]:
    """A read-only connection on a tablet file that can neither change it nor make a file beside it."""
    wal, shm = (path.with_name(path.name + s) for s in ("-wal", "-shm"))
    try:
        with contextlib.ExitStack() as stack:
            target, options = path.absolute(), "mode=ro&immutable=1"
            if wal.exists():
                options = "mode=ro"  # the app has it open (its index is there): SQLite's own reader protocol
                if not shm.exists():  # a log without its index: SQLite would make one beside the file
                    folder = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="baulk-recover-")))
                    target = folder / path.name
                    shutil.copyfile(path, target)
                    shutil.copyfile(wal, target.with_name(target.name + "-wal"))
            raw = sqlite3.connect(f"file:{quote(str(target))}?{options}", uri=True, check_same_thread=False)
            stack.callback(raw.close)
            engine = sa.create_engine("sqlite://", creator=lambda: raw, poolclass=sa.pool.StaticPool)
            stack.callback(engine.dispose, close=False)
            with engine.connect() as conn:
                yield conn
    except (sa.exc.DatabaseError, sqlite3.DatabaseError) as exc:
        reason = getattr(exc, "orig", None) or exc
        raise StoreError(f"{path} cannot be read as a tablet file ({reason}); nothing was recovered. Copy the file "
                         "from the tablet again, or leave it out (its work then stays on that tablet)") from None


def read_tablet(path: Path) -> TabletFile:
    """Check a tablet file whole (a tablet file, integrity, its versions' shapes and ids) and say what it holds."""
    path = Path(path)
    empty = path.stat().st_size == 0
    if empty or db.not_sqlite(path):  # read by SQLite, never by Python (schema.db.not_sqlite says why)
        what = "it is empty" if empty else "it is not a SQLite database"
        raise NotABaulkStore(f"{path} is not a tablet file ({what}); give the tablets' own .sqlite files to "
                             "--from-tablet")
    with _reading(path) as conn:
        tables = set(conn.exec_driver_sql("SELECT name FROM sqlite_master WHERE type = 'table'").scalars())
        if "alembic_version" in tables:
            raise NotABaulkStore(f"{path} is a camp server store, not a tablet file; a backup of the camp store "
                                 "goes to --backup (a file written by baulk backup), the tablets' own files to "
                                 "--from-tablet")
        if not _TABLET_TABLES <= tables:
            raise NotABaulkStore(f"{path} is not a tablet file (a SQLite database without Baulk's tablet tables); "
                                 "give the tablets' own .sqlite files to --from-tablet")
        problems = list(conn.exec_driver_sql("PRAGMA integrity_check").scalars())
        if problems != ["ok"]:
            raise StoreError(f"{path} fails SQLite's integrity check ({'; '.join(map(str, problems[:3]))}); nothing "
                             "was recovered. Copy the file from the tablet again, or leave it out (its work then "
                             "stays on that tablet)")
        tablet = _describe(conn, path)
        for _page in _versions(conn, tablet):  # every version's shape and id, before anything is written
            pass
    return tablet


def _describe(conn: sa.Connection, path: Path) -> TabletFile:
    state = dict(conn.execute(sa.select(sync_state.c.key, sync_state.c.value)).all())
    device = uuid.UUID(state["device"]) if state.get("device") else None
    devices, blocks, finds, sites = (metadata.tables[n] for n in ("device", "number_block", "find", "site"))
    me = conn.execute(sa.select(devices.c.label, devices.c.role).where(devices.c.id == device)).first()
    count = sa.select(sa.func.count()).select_from(field_version)
    acked = int(state.get("acked_batch") or 0)
    own = field_version.c.device == device
    return TabletFile(
        path=path, device=device, label=me.label if me else path.stem, role=me.role if me else "recorder",
        sites={str(i): c for i, c in conn.execute(sa.select(sites.c.id, sites.c.code))},
        versions=int(conn.execute(count).scalar_one()),
        own=int(conn.execute(count.where(own)).scalar_one()),
        unacked=int(conn.execute(count.where(own, sa.or_(field_version.c.batch.is_(None),
                                                          field_version.c.batch > acked))).scalar_one()),
        cursor=int(state.get("cursor") or 0),
        top_number=max(int(conn.execute(sa.select(sa.func.max(blocks.c["last"]))).scalar() or 0),
                       int(conn.execute(sa.select(sa.func.max(finds.c.number))).scalar() or 0)),
    )


_COLUMNS = ("id", "record", "record_id", "field", "value", "wall_ms", "counter", "device", "seq", "parents",
            "schema_version")


def _versions(conn: sa.Connection, tablet: TabletFile) -> Iterator[list[Version]]:
    """The tablet's version log a page at a time (in its own order), each version checked."""
    rowid = sa.literal_column("rowid")
    after = 0
    while True:
        rows = conn.execute(sa.select(rowid, *(field_version.c[c] for c in _COLUMNS))
                            .where(rowid > after).order_by(rowid).limit(_PAGE)).all()
        if not rows:
            return
        page = []
        for r in rows:
            data = {c: getattr(r, c) for c in _COLUMNS}
            data["parents"] = tuple(data["parents"] or ())
            try:
                page.append(Version.model_validate(data))
            except ValidationError as exc:
                first = exc.errors()[0]
                where = ".".join(str(p) for p in first["loc"])
                raise StoreError(f"{tablet.path}: the version {r.id!r} is damaged ({where}: {first['msg']}); nothing "
                                 "was recovered. Copy the file from the tablet again, or leave it out") from None
        check_version_ids(page, where=f"the tablet file {tablet.path}", fix=(
            "The file was altered after the tablet wrote it; copy it from the tablet again, or leave it out."))
        yield page
        after = rows[-1][0]


def _taken(tablet: TabletFile, page: list[Version]) -> tuple[list[Version], int]:
    """What a push would take of these versions: none of the server's own records; of the tablet's own edits, no
    set-up record from a device that is not a manager and no find number past 2^53 - 1 (the lost store refused
    those, and the tablet keeps them). Versions of other devices came from the camp store by pull."""
    taken, refused = [], 0
    for v in page:
        if v.record in SERVER_OWNED:
            continue
        if v.device == tablet.device and (
                (tablet.role != "manager" and needs_manager(v.record, v.field))
                or ((v.record, v.field) == ("find", "number") and isinstance(v.value, (int, float))
                    and not isinstance(v.value, bool) and v.value > MAX_JSON_INT)):
            refused += 1
            continue
        taken.append(v)
    return taken, refused


def _check_sites(store: ServerStore, tablets: list[TabletFile]) -> None:
    """Refuse a tablet of another camp: one that shares no site with the backup (or, without one, the first
    tablet)."""
    site = metadata.tables["site"]
    with store.read() as conn:
        known = {str(i): c for i, c in conn.execute(sa.select(site.c.id, site.c.code))}
    source = "the backup"
    if not known:
        first = next((t for t in tablets if t.sites), None)
        known, source = (first.sites, first.name) if first else ({}, "")
    for t in tablets:
        if known and t.sites and not set(t.sites) & set(known):
            raise StoreError(f"{t.path} records site {', '.join(sorted(t.sites.values()))}, not the site of {source} "
                             f"({', '.join(sorted(known.values()))}); nothing was recovered. Give only this camp's "
                             "tablet files")


def recover_store(url: str, tablets: list[Path], *, backup: Path | None = None, progress: Progress | None = None,
                  now: dt.datetime | None = None) -> dict[str, Any]:
    """Rebuild a lost store in a new one at ``url``: ``backup`` first (if given), then every tablet's version log;
    the number floor above every number seen; then fenced off from the lost store (``backup.fence``)."""
    say = progress or (lambda _msg: None)
    files = []
    for path in tablets:  # every file checked whole before anything is made
        say(f"checking {path}")
        files.append(read_tablet(path))
    info = read_sidecar(Path(backup)) if backup is not None else None
    with new_store(url) as work:
        if backup is not None and info is not None:
            say(f"restoring {Path(backup).name} (taken {info['made_at']})")
            load_backup(work, Path(backup), info, say)
        store = ServerStore.open(work)
        try:
            _check_sites(store, files)
            result = _merge(store, files, say)
            fenced = fence(store, now=now)
            counts = store.counts()
        finally:
            store.close()
    return {**result, **fenced, "counts": counts, "tablets": files, "backup": str(backup) if backup else None,
            "backup_made_at": info["made_at"] if info else None}


def _merge(store: ServerStore, files: list[TabletFile], say: Progress) -> dict[str, Any]:
    keys: set[tuple[str, uuid.UUID]] = set()
    with store.atomic() as conn:
        store._serialize(conn, "changelog")  # noqa: SLF001 - as every merge does
        store._serialize(conn, "number_block")  # noqa: SLF001
        floor_before = number_floor(conn)
        held_before = int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())
        for t in files:
            new = refused = read = 0
            with _reading(t.path) as tconn:
                for page in _versions(tconn, t):
                    taken, left_out = _taken(t, page)
                    top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0
                    added = insert_versions(conn, taken, next_log_seq=top + 1)
                    keys.update((v.record, v.record_id) for v in added)
                    new, refused, read = new + len(added), refused + left_out, read + len(page)
                    if t.versions > _PAGE:
                        say(f"{t.name}: {read} of {t.versions} versions read, {new} new here")
            t.merged = {"new": new, "left_out": refused}
            say(f"{t.name}: {t.versions} versions, {new} new here")
        rank = {name: i for i, name in enumerate(db.record_names())}
        ordered = sorted(keys, key=lambda k: (rank.get(k[0], len(rank)), str(k[1])))
        written = clashes = 0
        for i in range(0, len(ordered), _PAGE):  # referenced tables first, so few rows wait for a parent
            stats = materialize(conn, ordered[i:i + _PAGE])
            written, clashes = written + stats["written"], clashes + stats.get("number_clashes", 0)
            if len(ordered) > _PAGE:
                say(f"rows rebuilt for {min(i + _PAGE, len(ordered))} of {len(ordered)} records")
        written += retry_pending(conn).get("written", 0)
        tablets_top = max((t.top_number for t in files), default=0)
        floor = max(number_floor(conn), tablets_top)
        state_set(conn, "number_floor", floor)
        held = int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())
        conflicts = int(conn.execute(sa.select(sa.func.count()).select_from(open_conflict)).scalar_one())
        pending = int(conn.execute(sa.select(sa.func.count()).select_from(pending_row)).scalar_one())
    return {"versions_from_backup": held_before, "versions": held, "rows_written": written, "number_clashes": clashes,
            "conflicts_open": conflicts, "pending_rows": pending, "number_floor": floor,
            "floor_from_backup": floor_before, "floor_from_tablets": tablets_top}
