"""The tablet's local store: one SQLite file (WAL, synchronous=FULL, foreign keys on).

Every write goes through ``atomic()``; a find and its sample details are saved together or not at all. The file
is upgraded on open by the ordered migrations in ``mobile.migrations`` (a tablet that syncs late on an old file
is brought up to date without losing a row).
"""

from __future__ import annotations

import contextlib
import shutil
import sqlite3
import tempfile
import uuid
from pathlib import Path
from typing import Any, Iterator
from urllib.parse import quote

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from schema import db
from schema.errors import DuplicateRecord, FieldProblem, NoNumbersLeft, NotABaulkStore, RecordInvalid, StoreError
from schema.records import REGISTRY, Device, Find, NumberBlock, Sample
from schema.store import RecordStore
from schema.tables import metadata
from schema.validation import check

from . import migrations

__all__ = ["TABLET_PRAGMAS", "TabletStore", "check_tablet_file", "inspect_file"]

# SQLite copies the write-ahead log back into the file every 1000 pages by default, inside whichever save
# crosses the mark: with a season of finds that is one save in forty taking ten times as long. The tablet raises
# the mark (the log stays below ~40 MB) and the app copies back while the recorder is idle (``checkpoint``).
# Durability is unchanged: a committed save is in the log, synced, whatever the mark.
TABLET_PRAGMAS = (("wal_autocheckpoint", "10000"),)


_BLOCKS = metadata.tables["number_block"]
_IN_BLOCK = sa.select(_BLOCKS.c.id).where(_BLOCKS.c.device_id == sa.bindparam("me"),
                                          _BLOCKS.c.first <= sa.bindparam("n"), _BLOCKS.c.last >= sa.bindparam("n")).limit(1)
_FINDS = metadata.tables["find"]
_TAKEN = sa.select(_FINDS.c.id).where(_FINDS.c.site_id == sa.bindparam("site"), _FINDS.c.number == sa.bindparam("n"),
                                      _FINDS.c.id != sa.bindparam("me")).limit(1)
# the highest number of this device's own finds inside one of its blocks (the device_id/number index)
_USED_IN = sa.select(sa.func.max(_FINDS.c.number)).where(
    _FINDS.c.device_id == sa.bindparam("me"), _FINDS.c.number >= sa.bindparam("first"),
    _FINDS.c.number <= sa.bindparam("last"))


class TabletStore(RecordStore):
    """A tablet's SQLite file. Open with ``TabletStore.open(path)``; close with ``close()`` or ``with``."""

    def __init__(self, path: Path, engine: sa.Engine):
        super().__init__(engine)
        self.path = path

    @classmethod
    def open(cls, path: Path | str, *, upgrade: bool = True) -> "TabletStore":
        """Open (creating if needed) the store at ``path`` and bring it to the current migration."""
        path = Path(path)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(f"cannot create the folder for the tablet store {path}: {exc.strerror}") from None
        _refuse_other_files(path)
        store = cls(path, db.sqlite_engine(path, pragmas=TABLET_PRAGMAS))
        if upgrade:
            with store.atomic() as conn:
                migrations.upgrade(conn)
                store._version_unversioned(conn)
        return store

    def default_device(self) -> uuid.UUID | None:
        return self.device_id()

    def _version_unversioned(self, conn: Connection) -> None:
        """Give rows written before the sync layer existed their first versions, as this tablet's own edits."""
        from schema.sync.replica import insert_versions, load_identity, save_identity, state_get, state_set
        from schema.sync.replica import versions_for_edit
        from schema.sync.tables import field_version

        if state_get(conn, "versions_backfilled") is not None:
            return
        device = conn.exec_driver_sql("SELECT value FROM local_setting WHERE key = 'device_id'").scalar()
        if device is not None and state_get(conn, "device") is None:
            state_set(conn, "device", device)
        ident = load_identity(conn)
        versioned = set(conn.execute(sa.select(field_version.c.record_id).distinct()).scalars())
        for name in db.record_names():
            for record in db.select(conn, REGISTRY[name].model):
                if record.id not in versioned:  # type: ignore[attr-defined]
                    insert_versions(conn, versions_for_edit(conn, ident, record, new=True))
        save_identity(conn, ident)
        state_set(conn, "versions_backfilled", "yes")

    # -- identity and numbering ----------------------------------------------------------------------------
    def set_identity(self, *, device: Device) -> None:
        """Record which device this tablet is (after enrollment); must come before the first edit."""
        from schema.sync.replica import state_get, state_set
        from schema.sync.tables import field_version

        with self.atomic() as conn:
            mine = state_get(conn, "device")
            if mine not in (None, str(device.id)) and conn.execute(sa.select(field_version.c.id).limit(1)).first():
                raise StoreError(
                    f"this tablet file already holds edits made as device {mine}; it cannot become {device.label}. "
                    "Start a new tablet file for the new enrollment"
                )
            state_set(conn, "device", device.id)
            self.put(device)
            conn.exec_driver_sql(
                "INSERT INTO local_setting (key, value) VALUES ('device_id', ?) "
                "ON CONFLICT(key) DO UPDATE SET value = excluded.value",
                (str(device.id),),
            )
        self._device_id = None  # read again on the next call

    def device_id(self) -> uuid.UUID | None:
        """This tablet's device id (read once per open store: it changes only through ``set_identity``)."""
        if getattr(self, "_device_id", None) is None:
            value = self.setting("device_id")
            self._device_id = uuid.UUID(value) if value else None
        return self._device_id

    def set_token(self, token: str) -> None:
        """Keep the device token issued at enrollment (needed to sync and to seal bundles)."""
        self.set_setting("token", token)

    def token(self) -> str | None:
        return self.setting("token")

    # -- the tablet's own settings (day choices, server address, last sync); never synced ------------------
    def setting(self, key: str) -> str | None:
        with self.read() as conn:
            row = conn.exec_driver_sql("SELECT value FROM local_setting WHERE key = ?", (key,)).first()
            return row[0] if row else None

    def set_setting(self, key: str, value: str | None, *, conn: Connection | None = None) -> None:
        """Set (or with ``None`` remove) one local setting, in the caller's transaction when given."""
        if conn is None:
            with self.atomic() as own:
                return self.set_setting(key, value, conn=own)
        if value is None:
            conn.exec_driver_sql("DELETE FROM local_setting WHERE key = ?", (key,))
        else:
            conn.exec_driver_sql("INSERT INTO local_setting (key, value) VALUES (?, ?) "
                                 "ON CONFLICT(key) DO UPDATE SET value = excluded.value", (key, value))

    def add_number_block(self, *, block: NumberBlock) -> None:
        self.add(block)

    def number_blocks(self) -> list[NumberBlock]:
        me = self.device_id()
        if me is None:
            return []
        return self.list(NumberBlock, device_id=me, order_by="first")

    def next_find_number(self) -> int:
        """The next number of this device's blocks after the highest it used inside them. A number of its own
        finds outside its blocks (a camp renumbering, an edit an older Baulk let through) uses none of them."""
        me = self.device_id()
        blocks = self.number_blocks()
        with self.read() as conn:
            used = max((conn.execute(_USED_IN, {"me": me, "first": b.first, "last": b.last}).scalar() or 0
                        for b in blocks), default=0)
        for b in blocks:
            if b.last > used:
                return max(b.first, used + 1)
        raise NoNumbersLeft(
            "this tablet has used every find number it was issued; sync with the camp server to get a new block"
        )

    def numbers_left(self) -> int:
        """Find numbers this device can still give without a new block (0 when every one is used)."""
        try:
            nxt = self.next_find_number()
        except NoNumbersLeft:
            return 0
        return sum(b.last - max(b.first, nxt) + 1 for b in self.number_blocks() if b.last >= nxt)

    # -- finds ---------------------------------------------------------------------------------------------
    def save_find(self, *, find: Find | dict[str, Any], sample: Sample | dict[str, Any] | None = None) -> Find:
        """Validate and save a find (and its sample details) in one transaction; returns the saved find."""
        data = find.model_dump() if isinstance(find, Find) else dict(find)
        with self.atomic() as conn:  # one transaction (one commit) for the checks and the writes
            me = self.device_id()
            if me is not None:
                data.setdefault("device_id", me)
            saved = check(Find, data)
            self._check_number(conn, saved, data)
            details = self._sample_for(saved, sample)
            self.save_versioned(conn, saved, new=True)
            if details is not None:
                self.save_versioned(conn, details, new=True)
        return saved

    def update_find(self, *, find: Find | dict[str, Any]) -> Find:
        """Validate and save an edited find; a changed number follows the rules of a save (``_check_number``).
        An unchanged number is not judged again: a number the camp gave (a renumbering) stays editable."""
        data = find.model_dump() if isinstance(find, Find) else dict(find)
        with self.atomic() as conn:
            saved = check(Find, data)
            if db.get(conn, Find, saved.id).number != saved.number:
                self._check_number(conn, saved, data)
            self.save_versioned(conn, saved, new=False)
        return saved

    def _check_number(self, conn: Connection, find: Find, data: dict[str, Any]) -> None:
        """The number rules of a new find and of a number edit: a find of this device takes a number from this
        device's blocks, and no other find of the site holds it."""
        me = self.device_id()
        if me is not None and find.device_id == me and not self._in_my_blocks(conn, me, find.number):
            check(Find, data, context={"number_blocks": self.number_blocks()})  # raises, naming the blocks
        self._refuse_taken_number(conn, find)

    @staticmethod
    def _in_my_blocks(conn: Connection, me: uuid.UUID, number: int) -> bool:
        return conn.execute(_IN_BLOCK, {"me": me, "n": number}).first() is not None

    @staticmethod
    def _refuse_taken_number(conn: Connection, find: Find) -> None:
        """A number already used at the site is refused here (the table allows it, for clashes that arrive by
        sync and must stay visible)."""
        taken = conn.execute(_TAKEN, {"site": find.site_id, "n": find.number, "me": find.id}).first()
        if taken is not None:
            raise DuplicateRecord(f"find with number={find.number} already exists; choose another number or edit "
                                  "the existing record")

    @staticmethod
    def _sample_for(find: Find, sample: Sample | dict[str, Any] | None) -> Sample | None:
        if find.category == "sample" and sample is None:
            raise RecordInvalid("find", [FieldProblem(
                "sample", "a find of category 'sample' has no sample details",
                "give its purpose and container (and volume or mass)",
            )])
        if find.category != "sample" and sample is not None:
            raise RecordInvalid("find", [FieldProblem(
                "sample", f"sample details were given for a {find.category}", "set category to 'sample' or drop them",
            )])
        if sample is None:
            return None
        data = sample.model_dump() if isinstance(sample, Sample) else dict(sample)
        data["find_id"] = find.id
        return check(Sample, data, record="sample")

    def void_find(self, *, find_id: uuid.UUID, reason: str) -> Find:
        """Void a find (records are voided, never deleted); it keeps its number."""
        with self.atomic() as conn:
            current = db.get(conn, Find, find_id)
            voided = check(Find, {**current.model_dump(), "voided": True, "void_reason": reason})
            self.save_versioned(conn, voided, new=False)
        return voided

    def checkpoint(self) -> tuple[int, int, int]:
        """Copy the write-ahead log back into the file without waiting on anyone (SQLite's PASSIVE
        checkpoint); returns (busy, log pages, pages copied). The app calls it when idle and on close."""
        with self.engine.connect() as conn:  # straight on the driver: a checkpoint cannot run inside BEGIN
            busy, log, done = conn.connection.driver_connection.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchone()
            return int(busy), int(log), int(done)

    # -- health --------------------------------------------------------------------------------------------
    def integrity_check(self) -> str:
        """SQLite's ``PRAGMA integrity_check``: ``'ok'`` when the file is sound."""
        with self.engine.connect() as conn:
            return str(conn.exec_driver_sql("PRAGMA integrity_check").scalar())

    def pragmas(self) -> dict[str, Any]:
        with self.engine.connect() as conn:
            return {name: conn.exec_driver_sql(f"PRAGMA {name}").scalar() for name, _ in db.SQLITE_PRAGMAS}


_TABLET_TABLE = "baulk_migration"  # every tablet file has it from its first upgrade step on


def _not_a_tablet_file(path: Path, tables: set[str]) -> NotABaulkStore:
    if "alembic_version" in tables:
        return NotABaulkStore(f"{path} is not a tablet file: it is a camp server store; to check it, use "
                              f"baulk validate --db sqlite:///{path.absolute()} instead")
    return NotABaulkStore(f"{path} is not a tablet file (it is a SQLite database without Baulk's tablet tables); "
                          "check the path and give the tablet's own .sqlite file")


def _not_sqlite(path: Path) -> NotABaulkStore | None:
    """The refusal for a file that is not a SQLite database at all (empty files are for the caller to judge); the
    header is read by SQLite, never by Python (``schema.db.not_sqlite`` says why)."""
    if db.not_sqlite(path):
        return NotABaulkStore(f"{path} is not a tablet file (it is not a SQLite database); check the path and give "
                              "the tablet's own .sqlite file")
    return None


def _refuse_other_files(path: Path) -> None:
    """Refuse, before anything is written, an existing file that is plainly not a tablet file (another program's,
    or a camp server store), so that opening it never adds tablet tables to it; a new or empty file is a new
    tablet file. The look is read-only and ignores the write-ahead log, so a doubt (a file being written, a damaged
    one) is left to the open itself."""
    if not path.is_file() or path.stat().st_size == 0:
        return
    if (bad := _not_sqlite(path)) is not None:
        raise bad
    try:
        conn = sqlite3.connect(f"file:{quote(str(path.absolute()))}?mode=ro&immutable=1", uri=True)
        try:
            tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        finally:
            conn.close()
    except sqlite3.Error:
        return
    if tables and _TABLET_TABLE not in tables:
        raise _not_a_tablet_file(path, tables)


@contextlib.contextmanager
def _read_only(path: Path) -> Iterator[sqlite3.Connection]:
    """A connection that reads ``path`` as SQLite would and can neither change it nor make a file beside it.

    No write-ahead log beside it: the file is opened read-only and immutable (SQLite takes no lock and writes
    nothing). A log with its shared-memory index (the app has the file open): read-only, through SQLite's own
    reader protocol. A log left without its index (nobody has it open): the file and its log are read from a
    temporary copy, since SQLite would otherwise make the index beside the file.
    """
    wal, shm = (path.with_name(path.name + s) for s in ("-wal", "-shm"))
    with contextlib.ExitStack() as stack:
        target, options = path.absolute(), "mode=ro&immutable=1"
        if wal.exists():
            options = "mode=ro"
            if not shm.exists():
                folder = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="baulk-inspect-")))
                target = folder / path.name
                shutil.copyfile(path, target)
                shutil.copyfile(wal, target.with_name(target.name + "-wal"))
        conn = sqlite3.connect(f"file:{quote(str(target))}?{options}", uri=True)
        stack.callback(conn.close)
        yield conn


def check_tablet_file(path: Path | str) -> None:
    """Refuse, reading only (see ``_read_only``), anything but a tablet file: an empty file, one that is not SQLite,
    a camp server store, another program's database (``NotABaulkStore``), or a damaged one (``StoreError``); each
    in one sentence naming the file."""
    path = Path(path)
    if path.stat().st_size == 0:
        raise NotABaulkStore(f"{path} is not a tablet file (it is empty); check the path and give the tablet's own "
                             ".sqlite file")
    if (bad := _not_sqlite(path)) is not None:
        raise bad
    with _reading(path) as conn:
        tables = {r[0] for r in conn.exec_driver_sql("SELECT name FROM sqlite_master WHERE type='table'")}
    if _TABLET_TABLE not in tables:
        raise _not_a_tablet_file(path, tables)


@contextlib.contextmanager
def _reading(path: Path) -> Iterator[Connection]:
    """A read-only SQLAlchemy connection on ``path`` (``_read_only``); SQLite's complaints become ``StoreError``."""
    try:
        with _read_only(path) as raw:
            engine = sa.create_engine("sqlite://", creator=lambda: raw, poolclass=sa.pool.StaticPool)
            try:
                with engine.connect() as conn:
                    yield conn
            finally:
                engine.dispose(close=False)
    except (sa.exc.DatabaseError, sqlite3.DatabaseError) as exc:
        reason = getattr(exc, "orig", None) or exc
        raise StoreError(f"{path} is not a readable tablet file ({reason}); keep it and ask the data manager") from None


def inspect_file(path: Path | str) -> dict[str, Any]:
    """A report on a tablet file that never writes (see ``_read_only``): integrity, applied and pending upgrade
    steps, record counts. Anything but a tablet file is refused first (``check_tablet_file``)."""
    path = Path(path)
    check_tablet_file(path)
    with _reading(path) as conn:
        return _report(conn)


def _report(conn: Connection) -> dict[str, Any]:
    tables = {r[0] for r in conn.exec_driver_sql("SELECT name FROM sqlite_master WHERE type='table'")}
    integrity = "; ".join(str(r[0]) for r in conn.exec_driver_sql("PRAGMA integrity_check"))
    counts = {
        name: int(conn.exec_driver_sql(f'SELECT count(*) FROM "{name}"').scalar_one())
        for name in db.record_names() if name in tables
    }
    return {"integrity": integrity, "applied": migrations.applied(conn), "pending": migrations.pending(conn),
            "counts": counts}
