"""Backups of the camp store, and restoring one into a new store (``baulk backup``, ``baulk restore``).

Between syncs the camp laptop holds the only copy of the season. A backup is one file and a JSON sidecar beside
it, in a folder of the data manager's choosing (a USB stick, another disk)::

    baulk-<site>-<UTC time>.sqlite   (PostgreSQL: .dump)   the store as it was at one moment
    baulk-<site>-<UTC time>.sqlite.json                    its sidecar: format, moment, backend, site, Baulk
                                                           version, schema revision, row counts of every record
                                                           table and of the version log, the number floor, the
                                                           file's SHA-256 and a SHA-256 of the version log's ids

**SQLite.** SQLite's online backup API copies the store from inside one read transaction, so the copy is the
store at the moment that transaction began while ``baulk serve`` keeps writing (in WAL mode readers never block
writers, and a held snapshot never makes the copy start over); the row counts and the version log's digest are
read in that same transaction. The copy is written under a temporary name (``.baulk-backup-*.part``), checked
(``PRAGMA integrity_check``; the counts and the digest read again from the copy must equal the store's), then
renamed into place.
**PostgreSQL.** ``pg_dump`` (custom format, found on ``PATH``) of a snapshot exported by a REPEATABLE READ
transaction in which the counts are read; ``pg_restore --list`` must read the dump back and list every table.

Backups are kept in a rotation (the newest ``keep`` of the site in that folder; older ones and their sidecars
are deleted) and each one is recorded in the store's ``backup_log``, from which the camp Today page shows the
last one (``backup_status``): the store, not a folder setting, so the server knows of a backup wherever it went.

**Restore** makes a new store only: a SQLite file that does not exist yet, or an empty PostgreSQL database; an
existing store is refused (``StoreExists``). The backup's SHA-256 must match its sidecar; then (SQLite) the copy
is checked for integrity, counts and digest under ``NAME.part`` before it is renamed into place, or (PostgreSQL)
``pg_restore`` runs in one transaction and the counts are checked after, everything it made being dropped again
if they differ. Nothing half-written is left on failure (``BackupInvalid`` says what failed and what to do).

A restored store then **fences off the lost one** (``fence``): every device is revoked and the store takes a new
identity for its own edits. The tablets' pull positions point into the lost store's change log and the lost
store may have issued server versions the backup never saw, so an old tablet talking to the restored store
could skip changes or receive a version under an id it already holds for another; a tablet re-enrolled with a
new tablet file starts clean. What the tablets held is brought back first with ``baulk recover``
(``sync_server.recovery``).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import json
import os
import re
import shutil
import sqlite3
import subprocess
import uuid
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable, Iterator
from urllib.parse import quote

import sqlalchemy as sa

from schema import __version__, db
from schema.errors import BackupError, BackupInvalid, NotABaulkStore, StoreError, StoreExists, StoreMissing, StoreTooNew
from schema.sync.replica import state_get, state_set

from .store import ServerStore, check_existing, known_revisions, make_engine
from .tables import backup_log

__all__ = ["BACKUP_FORMAT", "DEFAULT_KEEP", "backup_status", "backup_store", "fence", "last_backup", "read_sidecar",
           "restore_store", "rotate"]

BACKUP_FORMAT = "baulk-backup"
BACKUP_VERSION = 1
DEFAULT_KEEP = 14
STEP_PAGES = 4096  # pages the SQLite backup copies between progress lines (16 MiB at 4 KiB pages)
_NAME = re.compile(r"^baulk-(?P<site>.+)-(?P<time>\d{8}T\d{6}Z)(?:-(?P<n>\d+))?\.(?P<ext>sqlite|dump)$")
_TIME = "%Y%m%dT%H%M%SZ"
_PART_PREFIX = ".baulk-backup-"  # a backup being written; one a day old was left by a run that was killed

Progress = Callable[[str], None]


def _quiet(_msg: str) -> None:
    pass


@dataclass
class Snapshot:
    """What a store held at one moment, read inside the transaction the backup copies."""

    made_at: str
    site: str
    schema_revision: str | None
    counts: dict[str, int]
    log_sha256: str
    number_floor: int


# -- reading a snapshot (the same queries on SQLite's own connection and on PostgreSQL) -------------------------
Query = Callable[[str], list[Any]]


def counted_tables() -> list[str]:
    """The tables whose rows a backup counts: every record table (dependency order) and the version log."""
    return [*db.record_names(), "field_version"]


def _read_snapshot(query: Query, tables: set[str], made_at: dt.datetime) -> Snapshot:
    counts = {t: int(query(f'SELECT count(*) FROM "{t}"')[0][0]) for t in counted_tables() if t in tables}
    revision = query("SELECT version_num FROM alembic_version")[0][0] if "alembic_version" in tables else None
    sites = [r[0] for r in query("SELECT code FROM site ORDER BY code")] if "site" in tables else []
    return Snapshot(made_at=made_at.isoformat(), site=_safe(sites[0]) if sites else "store",
                    schema_revision=revision, counts=counts, log_sha256=_log_digest(query, tables),
                    number_floor=_floor(query, tables))


def _log_digest(query: Query, tables: set[str]) -> str:
    """SHA-256 over the version log's ids in change-log order: equal on a store and on a faithful copy of it."""
    h = hashlib.sha256()
    if "field_version" in tables:
        for (vid,) in query("SELECT id FROM field_version ORDER BY log_seq, id"):
            h.update(vid.encode() + b"\n")
    return h.hexdigest()


def _floor(query: Query, tables: set[str]) -> int:
    """``sync_server.store.number_floor`` read with plain SQL (the snapshot's own connection)."""
    found = [0]
    if "number_block" in tables:
        found.append(query('SELECT max("last") FROM number_block')[0][0] or 0)
    if "find" in tables:
        found.append(query("SELECT max(number) FROM find")[0][0] or 0)
    if "sync_state" in tables:
        found.extend(int(r[0] or 0) for r in query("SELECT value FROM sync_state WHERE key = 'number_floor'"))
    return max(int(n) for n in found)


def _safe(code: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]", "_", code) or "store"


# -- baulk backup ----------------------------------------------------------------------------------------------
def backup_store(url: str, folder: Path, *, keep: int = DEFAULT_KEEP, progress: Progress | None = None,
                 now: dt.datetime | None = None) -> dict[str, Any]:
    """Back up the store at ``url`` into ``folder``: written under a temporary name, verified, renamed into place
    with its sidecar, recorded in the store's ``backup_log``; then only the newest ``keep`` backups of the site are
    kept. Returns the sidecar with ``path`` and ``removed`` (the older backups deleted). Nothing is kept on failure."""
    if keep < 1:
        raise BackupError(f"--keep {keep} would delete every backup, even the new one; keep at least 1")
    say = progress or _quiet
    backend = _backend(url)
    tools = _pg_tools() if backend == "postgresql" else {}
    check_existing(url)  # a missing or foreign store is refused before anything is written
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    made_at = (now or dt.datetime.now(dt.timezone.utc)).replace(microsecond=0)
    ext = ".sqlite" if backend == "sqlite" else ".dump"
    part = folder / f"{_PART_PREFIX}{uuid.uuid4().hex[:12]}{ext}.part"  # named for its site once the snapshot says
    try:
        if backend == "sqlite":
            snap = _backup_sqlite(_sqlite_path(url), part, made_at, say)
            say("checking the copy: integrity, row counts, version log")
            _verify_sqlite_copy(part, snap, what=f"the backup being written to {folder}", fix=(
                f"nothing was kept. Check the disk of {folder} (free space, a failing stick) and run baulk backup "
                "again"))
        else:
            snap = _backup_pg(url, part, made_at, tools, say)
            say("checking the dump: pg_restore --list reads it")
            _verify_dump_lists(part, snap, tools, what=f"the dump being written to {folder}", fix=(
                f"nothing was kept. Check the disk of {folder} and the pg_dump version (it must be at least the "
                "server's), then run baulk backup again"))
        final = _free_name(folder, snap.site, made_at, ext)
        info = {"format": BACKUP_FORMAT, "format_version": BACKUP_VERSION, "file": final.name, "backend": backend,
                "baulk_version": __version__, **asdict(snap), "bytes": part.stat().st_size, "sha256": _sha256(part)}
        _fsync(part)
        part.replace(final)
    finally:
        part.unlink(missing_ok=True)
    _write_json(_sidecar_path(final), info)
    _fsync_dir(folder)
    removed = rotate(folder, snap.site, keep)
    not_recorded = _record(url, final, info)
    return {**info, "path": str(final), "removed": [str(p) for p in removed], "not_recorded": not_recorded}


def _backend(url: str) -> str:
    try:
        return sa.make_url(url).get_backend_name()
    except sa.exc.ArgumentError:
        check_existing(url)  # names the bad URL and the forms Baulk takes
        raise


def _sqlite_path(url: str) -> Path:
    return Path(sa.make_url(url).database or "")


def _backup_sqlite(path: Path, part: Path, made_at: dt.datetime, say: Progress) -> Snapshot:
    """Copy the store with SQLite's backup API from inside one read transaction; the snapshot read in it."""
    src = sqlite3.connect(f"file:{quote(str(path.absolute()))}?mode=rw", uri=True, timeout=60, isolation_level=None)
    try:
        src.execute("BEGIN")  # deferred: the snapshot is taken by the first read and held until COMMIT
        tables = {r[0] for r in src.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        snap = _read_snapshot(lambda q: src.execute(q).fetchall(), tables, made_at)
        total = sum(snap.counts.values())
        say(f"snapshot of {path} at {made_at:%Y-%m-%d %H:%M:%S} UTC: {snap.counts.get('find', 0)} finds, "
            f"{snap.counts.get('field_version', 0)} versions, {total} rows in {len(snap.counts)} tables")
        dst = sqlite3.connect(part, isolation_level=None)
        try:
            def step(_status: int, remaining: int, pages: int) -> None:
                if pages > STEP_PAGES:  # one line a step, only when there is more than one
                    say(f"copied {pages - remaining} of {pages} pages")

            src.backup(dst, pages=STEP_PAGES, progress=step)
            dst.execute("PRAGMA journal_mode=DELETE")  # one self-contained file: no -wal beside the backup
        finally:
            dst.close()
        src.execute("COMMIT")
    finally:
        src.close()
    return snap


def _verify_sqlite_copy(path: Path, snap: Snapshot | dict[str, Any], *, what: str, fix: str,
                        error: type[BackupError] = BackupError) -> None:
    """Integrity, row counts and the version log's digest of the SQLite file at ``path`` against ``snap``."""
    expected = snap if isinstance(snap, dict) else asdict(snap)
    try:
        conn = sqlite3.connect(f"file:{quote(str(path.absolute()))}?mode=ro", uri=True)
        try:
            problems = [r[0] for r in conn.execute("PRAGMA integrity_check")]
            if problems != ["ok"]:
                raise error(f"{what} fails SQLite's integrity check ({'; '.join(map(str, problems[:3]))}); "
                            f"{fix}")
            tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            found = _read_snapshot(lambda q: conn.execute(q).fetchall(), tables,
                                   dt.datetime.fromisoformat(expected["made_at"]))
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        raise error(f"{what} cannot be read as a SQLite database ({exc}); {fix}") from None
    _compare(found, expected, what=what, fix=fix, error=error)


def _compare(found: Snapshot, expected: dict[str, Any], *, what: str, fix: str,
             error: type[BackupError] = BackupError) -> None:
    for table, n in expected["counts"].items():
        if found.counts.get(table) != n:
            raise error(f"{what} holds {found.counts.get(table, 'no')} rows of {table} where the store held {n}; "
                        f"{fix}")
    if found.log_sha256 != expected["log_sha256"]:
        raise error(f"{what} holds a different version log than the store had (its ids' SHA-256 differs); {fix}")


# -- PostgreSQL: pg_dump and pg_restore -------------------------------------------------------------------------
def _pg_tools() -> dict[str, str]:
    """pg_dump and pg_restore from PATH, or a sentence naming what to install."""
    found = {name: shutil.which(name) for name in ("pg_dump", "pg_restore")}
    missing = [name for name, where in found.items() if where is None]
    if missing:
        raise BackupError(
            f"{' and '.join(missing)} {'is' if len(missing) == 1 else 'are'} not on PATH; a PostgreSQL store is "
            "backed up and restored with PostgreSQL's own client programs: install them (on Debian: apt-get "
            "install postgresql-client, the server's major version or newer) or add their folder to PATH, then "
            "run the command again")
    return {k: v for k, v in found.items() if v}


def _libpq(url: str) -> tuple[str, dict[str, str]]:
    """The libpq address of a SQLAlchemy PostgreSQL URL (no password in it: that goes in the environment)."""
    parsed = sa.make_url(url)
    env = dict(os.environ)
    if parsed.password:
        env["PGPASSWORD"] = str(parsed.password)
    plain = parsed.set(drivername="postgresql", password=None)
    return plain.render_as_string(hide_password=False), env


def _run_tool(args: list[str], env: dict[str, str], say: Progress | None, *, tool: str, what: str, fix: str) -> str:
    """Run a PostgreSQL client program; its verbose lines become progress lines; a failure a ``BackupError``."""
    errors: list[str] = []
    out = ""
    with subprocess.Popen(args, stdout=subprocess.PIPE if say is None else subprocess.DEVNULL,
                          stderr=subprocess.PIPE, env=env, text=True) as proc:
        if say is None:
            out, err = proc.communicate()
            errors = err.splitlines()
        else:
            assert proc.stderr is not None
            for line in proc.stderr:
                line = line.rstrip()
                if "dumping contents of table" in line or "processing data for table" in line:
                    say(line.split(": ", 1)[-1])
                elif line:
                    errors.append(line)
    if proc.returncode != 0:
        said = "; ".join(e.split(": ", 1)[-1] for e in errors[-2:]) or f"exit code {proc.returncode}"
        raise BackupError(f"{tool} could not {what} ({said}); {fix}")
    return out


def _backup_pg(url: str, part: Path, made_at: dt.datetime, tools: dict[str, str], say: Progress) -> Snapshot:
    """pg_dump of a snapshot exported by a REPEATABLE READ transaction, the counts read in that transaction."""
    shown = sa.make_url(url).render_as_string(hide_password=True)
    address, env = _libpq(url)
    engine = sa.create_engine(url, isolation_level="REPEATABLE READ")
    try:
        with engine.connect() as conn:
            snapshot = conn.exec_driver_sql("SELECT pg_export_snapshot()").scalar_one()
            tables = set(sa.inspect(conn).get_table_names())
            snap = _read_snapshot(lambda q: conn.exec_driver_sql(q).all(), tables, made_at)
            say(f"snapshot of {shown} at {made_at:%Y-%m-%d %H:%M:%S} UTC: {snap.counts.get('find', 0)} finds, "
                f"{snap.counts.get('field_version', 0)} versions; pg_dump running")
            _run_tool([tools["pg_dump"], "--format=custom", "--verbose", "--no-password", f"--snapshot={snapshot}",
                       f"--file={part}", f"--dbname={address}"], env, say, tool="pg_dump",
                      what=f"back up {shown}", fix="nothing was kept. Check that the database is running and that "
                      "its user may read every table, then run baulk backup again")
            conn.rollback()  # the snapshot was needed until pg_dump had taken it
    finally:
        engine.dispose()
    return snap


def _verify_dump_lists(path: Path, snap: Snapshot | dict[str, Any], tools: dict[str, str], *, what: str, fix: str,
                       error: type[BackupError] = BackupError) -> None:
    """``pg_restore --list`` must read the dump and list the data of every counted table."""
    counts = snap["counts"] if isinstance(snap, dict) else snap.counts
    try:
        listing = _run_tool([tools["pg_restore"], "--list", str(path)], dict(os.environ), None, tool="pg_restore",
                            what=f"read {what}", fix=fix)
    except BackupError as exc:
        raise error(str(exc)) from None
    listed = {m.group(1) for m in re.finditer(r" TABLE DATA \S+ (\S+) ", listing)}
    missing = sorted(set(counts) - listed)
    if missing:
        raise error(f"{what} lists no data for the table{'s' if len(missing) > 1 else ''} {', '.join(missing)}; "
                    f"{fix}")


# -- files, names, rotation ------------------------------------------------------------------------------------
def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _fsync(path: Path) -> None:
    with path.open("rb") as fh:
        os.fsync(fh.fileno())


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError):  # not every file system lets a folder be opened for this
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _write_json(path: Path, data: dict[str, Any]) -> None:
    part = path.with_name(path.name + ".part")
    try:
        part.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n")
        _fsync(part)
        part.replace(path)
    finally:
        part.unlink(missing_ok=True)


def _sidecar_path(backup: Path) -> Path:
    return backup.with_name(backup.name + ".json")


def _free_name(folder: Path, site: str, made_at: dt.datetime, ext: str) -> Path:
    base = f"baulk-{site}-{made_at.strftime(_TIME)}"
    path, n = folder / f"{base}{ext}", 1
    while path.exists() or _sidecar_path(path).exists():
        n += 1
        path = folder / f"{base}-{n}{ext}"
    return path


def _backups(folder: Path, site: str) -> list[Path]:
    """The complete backups (file and sidecar) of ``site`` in ``folder``, oldest first."""
    found = []
    for sidecar in folder.glob("baulk-*.json"):
        backup = sidecar.with_name(sidecar.name.removesuffix(".json"))
        m = _NAME.match(backup.name)
        if m and m["site"] == site and backup.is_file():
            found.append((m["time"], int(m["n"] or 1), backup))
    return [p for *_key, p in sorted(found)]


def rotate(folder: Path, site: str, keep: int) -> list[Path]:
    """Delete all but the newest ``keep`` backups of ``site`` in ``folder`` (each with its sidecar); returns the
    backups deleted. Other sites' backups and other files are left alone."""
    old = _backups(Path(folder), site)[:-keep] if keep > 0 else []
    for backup in old:
        _sidecar_path(backup).unlink(missing_ok=True)
        backup.unlink(missing_ok=True)
    day_ago = dt.datetime.now().timestamp() - 86400
    for left in Path(folder).glob(f"{_PART_PREFIX}*.part"):
        with contextlib.suppress(OSError):
            if left.stat().st_mtime < day_ago:
                left.unlink()
    return old


# -- what the server knows of its backups ----------------------------------------------------------------------
def _record(url: str, path: Path, info: dict[str, Any]) -> str | None:
    """Add the backup to the store's ``backup_log``; None when done, else why not (the backup itself stands)."""
    engine = make_engine(url)
    try:
        with engine.begin() as conn:
            if not sa.inspect(conn).has_table("backup_log"):
                return "the store is of an older Baulk, without a backup log: start baulk serve once to upgrade it"
            conn.execute(backup_log.insert().values(
                id=uuid.uuid4(), made_at=dt.datetime.fromisoformat(info["made_at"]), path=str(path.absolute()),
                bytes=info["bytes"], sha256=info["sha256"]))
    except sa.exc.OperationalError as exc:  # e.g. a write that held the store past the busy timeout
        return f"the store could not be written ({exc.orig}); run baulk backup again later"
    finally:
        engine.dispose()
    return None


def last_backup(store: ServerStore) -> dict[str, Any] | None:
    """The newest backup recorded in the store: ``made_at``, ``path``, ``bytes``, ``sha256``; None if none."""
    with store.read() as conn:
        row = conn.execute(sa.select(backup_log).order_by(backup_log.c.made_at.desc()).limit(1)).first()
    return dict(row._mapping) if row else None


def backup_status(store: ServerStore, *, warn_hours: float | None = None,
                  now: dt.datetime | None = None) -> dict[str, Any]:
    """The Today page's backup line: ``text`` and ``warn`` (no backup, or the last one older than ``warn_hours``;
    the setting ``backup_warn_hours`` when not given)."""
    if warn_hours is None:
        from .settings import ServerSettings

        warn_hours = ServerSettings().backup_warn_hours
    now = now or dt.datetime.now(dt.timezone.utc)
    last = last_backup(store)
    if last is None:
        return {"warn": True, "at": None, "text": (
            "No backup of this store has been made. The laptop holds the only copy of what the tablets have not "
            "pulled: run baulk backup --to FOLDER (a USB stick or another disk), and again every day.")}
    at = last["made_at"]
    hours = (now - at).total_seconds() / 3600
    age = f"{hours:.0f} hours" if hours < 48 else f"{hours / 24:.0f} days"
    when = f"{at:%Y-%m-%d %H:%M} UTC, {age} ago"
    if hours > warn_hours:
        return {"warn": True, "at": at, "text": (
            f"The last backup is older than {warn_hours:g} hours: {when}, to {last['path']}. Run baulk backup "
            "--to FOLDER now.")}
    return {"warn": False, "at": at, "text": f"Last backup: {when}, to {last['path']}."}


# -- baulk restore ---------------------------------------------------------------------------------------------
def read_sidecar(backup: Path) -> dict[str, Any]:
    """The sidecar of ``backup`` (``NAME.json`` beside it), checked for the fields a restore needs."""
    backup = Path(backup)
    sidecar = _sidecar_path(backup)
    if not sidecar.is_file():
        raise BackupInvalid(f"{backup} has no sidecar {sidecar.name} beside it (every backup is written with one: "
                            "its moment, row counts and SHA-256, without which it cannot be checked); nothing was "
                            f"restored. Copy {sidecar.name} from the backup folder next to it")
    try:
        info = json.loads(sidecar.read_text())
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise BackupInvalid(f"{sidecar} is not a backup sidecar (not JSON: {exc}); nothing was restored. Copy it "
                            "again from the backup folder") from None
    needed = {"format", "backend", "made_at", "counts", "sha256", "log_sha256", "schema_revision"}
    if not isinstance(info, dict) or info.get("format") != BACKUP_FORMAT or not needed <= set(info):
        shown = info.get("format") if isinstance(info, dict) else None
        raise BackupInvalid(f"{sidecar} is not a Baulk backup sidecar (format {shown!r}, or fields missing); nothing "
                            "was restored. Give a backup written by baulk backup, with its own sidecar")
    if info.get("format_version") != BACKUP_VERSION:
        raise BackupInvalid(f"{sidecar} is of backup format {info.get('format_version')}; this Baulk reads format "
                            f"{BACKUP_VERSION}: restore it with the Baulk that wrote it ({info.get('baulk_version')})")
    if info["schema_revision"] is not None and info["schema_revision"] not in known_revisions():
        raise StoreTooNew(f"{backup} was written by a newer Baulk ({info.get('baulk_version')}, schema revision "
                          f"{info['schema_revision']}); restore it with that Baulk or a newer one")
    return info


def check_new_target(url: str) -> None:
    """Refuse (``StoreExists``) a target that is not new: an existing SQLite file, a PostgreSQL database with
    tables. A restore or recovery never overwrites or merges into what is there."""
    if _backend(url) == "sqlite":
        path = _sqlite_path(url)
        if not path.exists():
            return
        try:
            check_existing(url)
        except (NotABaulkStore, StoreMissing, StoreError):
            raise StoreExists(f"{path} already exists (and is not a Baulk store); a restore writes only a new store, "
                              "so nothing was changed: give --db a SQLite file that does not exist yet") from None
        raise StoreExists(f"{path} is an existing Baulk store; a restore writes only a new store, so nothing was "
                          f"changed: give --db a SQLite file that does not exist yet (e.g. sqlite:///"
                          f"{path.with_name(path.stem + '-restored' + path.suffix)}) and point baulk serve at it, or "
                          "move this store aside first if it is the one to replace")
    shown = sa.make_url(url).render_as_string(hide_password=True)
    tables = _pg_tables(url)
    if "alembic_version" in tables:
        raise StoreExists(f"the PostgreSQL database {shown} is an existing Baulk store; a restore writes only a new "
                          "store, so nothing was changed: create an empty database (createdb) and give it to --db")
    if tables:
        raise StoreExists(f"the PostgreSQL database {shown} is not empty (it has {len(tables)} tables, e.g. "
                          f"{sorted(tables)[0]}); a restore writes only into an empty database, so nothing was "
                          "changed: create an empty one (createdb) and give it to --db")


def _pg_tables(url: str) -> set[str]:
    shown = sa.make_url(url).render_as_string(hide_password=True)
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            return set(conn.exec_driver_sql(
                "SELECT table_name FROM information_schema.tables "
                "WHERE table_schema NOT IN ('pg_catalog', 'information_schema')").scalars())
    except sa.exc.OperationalError as exc:
        raise StoreError(f"cannot open the PostgreSQL database {shown} ({exc.orig}); check the URL, that the server "
                         "is running and that the database exists (create an empty one with createdb)") from None
    finally:
        engine.dispose()


@contextlib.contextmanager
def new_store(url: str) -> Iterator[str]:
    """A place to build a new store in, put in place only when the block ends without error.

    SQLite: the URL of ``FILE.part`` beside the target, renamed to ``FILE`` at the end (one self-contained file;
    deleted on failure). PostgreSQL: the (empty) database itself; every table made in it is dropped on failure."""
    check_new_target(url)
    if _backend(url) == "sqlite":
        path = _sqlite_path(url)
        path.parent.mkdir(parents=True, exist_ok=True)
        part = path.with_name(path.name + ".part")
        _remove_sqlite(part)  # our own name: a leftover of a run that was killed
        try:
            yield f"sqlite:///{part.absolute()}"
            _settle_sqlite(part)
            if path.exists():
                raise StoreExists(f"{path} appeared while the new store was being made; nothing was put in its "
                                  "place: give --db a SQLite file that does not exist yet")
            part.replace(path)
            _fsync_dir(path.parent)
        finally:
            _remove_sqlite(part)
        return
    try:
        yield url
    except BaseException:
        _drop_tables(url)
        raise


def _remove_sqlite(path: Path) -> None:
    for suffix in ("", "-wal", "-shm", "-journal"):
        path.with_name(path.name + suffix).unlink(missing_ok=True)


def _settle_sqlite(path: Path) -> None:
    """Fold the write-ahead log into the file and leave it self-contained and on disk, ready to be renamed."""
    conn = sqlite3.connect(path, isolation_level=None)
    try:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        conn.execute("PRAGMA journal_mode=DELETE")
    finally:
        conn.close()
    _fsync(path)


def _drop_tables(url: str) -> None:
    engine = sa.create_engine(url)
    try:
        with engine.begin() as conn:
            tables = conn.exec_driver_sql("SELECT tablename FROM pg_tables WHERE schemaname = current_schema()")
            for name in tables.scalars().all():
                conn.exec_driver_sql(f'DROP TABLE IF EXISTS "{name}" CASCADE')
    finally:
        engine.dispose()


def load_backup(work_url: str, backup: Path, info: dict[str, Any], progress: Progress | None = None) -> None:
    """Put ``backup`` into the new store at ``work_url`` and check it there against its sidecar ``info``."""
    say = progress or _quiet
    backup = Path(backup)
    fix = ("nothing was restored. Restore an older backup from the same folder (baulk restore THAT-FILE --db URL), "
           "or copy this one again from where it was kept")
    if info["backend"] != _backend(work_url):
        form = "sqlite:///FILE" if info["backend"] == "sqlite" else "postgresql+psycopg://..."
        raise BackupInvalid(f"{backup} is a {info['backend']} backup and restores only into a {info['backend']} store; "
                            f"nothing was restored: give --db a {form} URL")
    if info["backend"] == "sqlite":
        part = _sqlite_path(work_url)
        say(f"copying {backup.name} to {part.parent}")
        shutil.copyfile(backup, part)
        _check_hash(part, backup, info, fix)
        say("checking the copy: integrity, row counts, version log")
        _verify_sqlite_copy(part, info, what=f"the backup {backup}", fix=fix, error=BackupInvalid)
        return
    tools = _pg_tools()
    _check_hash(backup, backup, info, fix)
    _verify_dump_lists(backup, info, tools, what=f"the backup {backup}", fix=fix, error=BackupInvalid)
    address, env = _libpq(work_url)
    say(f"pg_restore {backup.name} in one transaction")
    _run_tool([tools["pg_restore"], "--single-transaction", "--exit-on-error", "--no-owner", "--no-privileges",
               "--verbose", "--no-password", f"--dbname={address}", str(backup)], env, say, tool="pg_restore",
              what=f"restore {backup}", fix=fix)
    engine = sa.create_engine(work_url)
    try:
        with engine.connect() as conn:
            tables = set(sa.inspect(conn).get_table_names())
            found = _read_snapshot(lambda q: conn.exec_driver_sql(q).all(), tables,
                                   dt.datetime.fromisoformat(info["made_at"]))
    finally:
        engine.dispose()
    _compare(found, info, what=f"the store restored from {backup}", fix=f"it was removed again, so {fix}",
             error=BackupInvalid)


def _check_hash(path: Path, backup: Path, info: dict[str, Any], fix: str) -> None:
    found = _sha256(path)
    if found != info["sha256"]:
        raise BackupInvalid(f"{backup} does not match the SHA-256 its sidecar recorded when it was written (expected "
                            f"{info['sha256'][:16]}..., found {found[:16]}...): the file was changed or damaged "
                            f"since; {fix}")


def fence(store: ServerStore, *, now: dt.datetime | None = None) -> dict[str, Any]:
    """Cut a restored or recovered store off from the lost one: revoke every device (each re-enrols with a new
    tablet file, so no tablet pulls from a cursor into the lost store's change log) and give the store a new
    identity for its own edits (so none of its new versions can take an id the lost store already gave out, with
    its sequence starting again from the backup's). Its clock goes on from the laptop's own clock, as before."""
    from schema.tables import metadata

    now = now or dt.datetime.now(dt.timezone.utc)
    device = metadata.tables["device"]
    with store.atomic() as conn:
        revoked = conn.execute(sa.update(device).where(device.c.revoked_at.is_(None)).values(revoked_at=now)).rowcount
        previous = state_get(conn, "device")
        new = uuid.uuid4()
        state_set(conn, "device", new)
        state_set(conn, "seq", 0)
    return {"devices_revoked": revoked, "previous_identity": previous, "identity": str(new)}


def restore_store(backup: Path, url: str, *, progress: Progress | None = None,
                  now: dt.datetime | None = None) -> dict[str, Any]:
    """Restore ``backup`` into a new store at ``url`` (checked against its sidecar before it is put in place),
    upgrade it to this Baulk's schema and fence it off from the lost store (``fence``)."""
    backup = Path(backup)
    info = read_sidecar(backup)
    if info["backend"] == "postgresql":
        _pg_tools()
    with new_store(url) as work:
        load_backup(work, backup, info, progress)
        store = ServerStore.open(work)
        try:
            fenced = fence(store, now=now)
            counts = {**store.counts(), "field_version": info["counts"].get("field_version", 0)}
        finally:
            store.close()
    return {"backup": str(backup), "made_at": info["made_at"], "schema_revision": info["schema_revision"],
            "counts": counts, "number_floor": info.get("number_floor"), **fenced}
