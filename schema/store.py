"""The interface both stores share: transactions and keyword-only record helpers over one engine.

``TabletStore`` (mobile/) and ``ServerStore`` (sync_server/) subclass ``RecordStore`` and add what only they do
(numbering on the tablet, devices and blocks on the server). Every multi-row write runs inside ``atomic()``;
nested ``atomic()`` blocks become savepoints.
"""

from __future__ import annotations

import contextlib
import threading
import uuid
from typing import TYPE_CHECKING, Any, Iterator, TypeVar

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import db
from .errors import RecordNotFound
from .records import REGISTRY, Record
from .tables import metadata
from .validation import check

if TYPE_CHECKING:
    from .records import StationSetup
    from .strata.data import SiteData

__all__ = ["RecordStore"]

R = TypeVar("R", bound=Record)


class RecordStore:
    """Records in one database; subclasses decide how the engine is made and migrated."""

    def __init__(self, engine: sa.Engine):
        self.engine = engine
        self._local = threading.local()
        # SQLite has one writer at a time. Writers of this process queue here, without a time limit, rather than
        # in SQLite's busy handler, whose timeout would turn a long queue (twenty tablets pushing at once) into
        # "database is locked" errors; the busy timeout still covers writers in other processes.
        self._writer = threading.Lock() if engine.dialect.name == "sqlite" else contextlib.nullcontext()

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "RecordStore":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextlib.contextmanager
    def atomic(self) -> Iterator[Connection]:
        """A write transaction; nested calls become savepoints, so an inner failure rolls back alone."""
        conn: Connection | None = getattr(self._local, "conn", None)
        if conn is not None:
            with conn.begin_nested():
                yield conn
            return
        with self._writer, self.engine.begin() as conn:
            self._local.conn = conn
            try:
                yield conn
            finally:
                self._local.conn = None

    @contextlib.contextmanager
    def read(self) -> Iterator[Connection]:
        """A read transaction (on SQLite a deferred BEGIN, which never waits for a writer)."""
        conn: Connection | None = getattr(self._local, "conn", None)
        if conn is not None:
            yield conn
            return
        with self.engine.connect().execution_options(baulk_read=True) as conn, conn.begin():
            yield conn

    def save_versioned(self, conn: Connection, record: Record, *, new: bool) -> None:
        """Write a record's visible row and, in the same transaction, the field versions of the change."""
        from .sync.replica import (
            insert_versions, load_identity, materialize, retry_waiting, save_identity, versions_for_edit,
        )

        (db.insert if new else db.update)(conn, record)  # friendly errors for a local edit
        from .sync.versions import LOCAL_ONLY

        if record.record_name in LOCAL_ONLY:
            return
        ident = load_identity(conn, default_device=self.default_device)
        versions = versions_for_edit(conn, ident, record, new=new)
        if versions:
            insert_versions(conn, versions)
            save_identity(conn, ident)
        if not new:  # a concurrent value from elsewhere may still win the field
            materialize(conn, [(record.record_name, getattr(record, "id"))])
        else:  # a synced row may be waiting for this one (its parent)
            retry_waiting(conn, [(record.record_name, getattr(record, "id"))])

    def default_device(self) -> "uuid.UUID | None":
        """The device id this store's versions carry when none is recorded yet (None: a fresh random id)."""
        return None

    def add(self, record: R) -> R:
        """Insert a new record, validated again first."""
        record = check(type(record), record)
        with self.atomic() as conn:
            self.save_versioned(conn, record, new=True)
        return record

    def create(self, name: str, data: dict[str, Any]) -> Record:
        """Validate plain field values (a form, a file row) as the record ``name`` and insert it."""
        spec = REGISTRY[name]
        record = check(spec.model, data, record=name)
        with self.atomic() as conn:
            self.save_versioned(conn, record, new=True)
        return record

    def put(self, record: R) -> R:
        """Insert or replace a record by id."""
        record = check(type(record), record)
        with self.atomic() as conn:
            t = metadata.tables[record.record_name]
            key = getattr(record, "id")
            exists = conn.execute(sa.select(t.c.id).where(t.c.id == key)).first()
            self.save_versioned(conn, record, new=not exists)
        return record

    def get(self, model: type[R], record_id: uuid.UUID) -> R:
        with self.read() as conn:
            return db.get(conn, model, record_id)

    def list(self, model: type[R], *, order_by: str | None = None, **where: Any) -> list[R]:
        with self.read() as conn:
            return list(db.select(conn, model, order_by=order_by, **where))

    def count(self, model: type[Record], **where: Any) -> int:
        with self.read() as conn:
            return db.count(conn, model, **where)

    def counts(self) -> dict[str, int]:
        """Rows per record table."""
        with self.read() as conn:
            return {
                name: int(conn.execute(sa.select(sa.func.count()).select_from(metadata.tables[name])).scalar_one())
                for name in db.record_names()
            }

    def assign_horizon(self, *, unit_id: "uuid.UUID", horizon_id: "uuid.UUID | None", by: str,
                       at: "Any", note: str = "") -> "Any":
        """Put a unit in a horizon (or take it out) and keep who did it, when and why, in one transaction."""
        from .records import HorizonAssignment, Unit

        with self.atomic() as conn:
            unit = db.get(conn, Unit, unit_id)
            entry = check(HorizonAssignment, {"unit_id": unit_id, "horizon_id": horizon_id, "assigned_by": by,
                                              "assigned_at": at, "note": note})
            self.save_versioned(conn, check(Unit, {**unit.model_dump(), "horizon_id": horizon_id}), new=False)
            self.save_versioned(conn, entry, new=True)
        return entry

    def horizon_history(self, unit_id: "uuid.UUID") -> "list[Any]":
        """Every horizon assignment of a unit, oldest first."""
        from .records import HorizonAssignment

        return sorted(self.list(HorizonAssignment, unit_id=unit_id), key=lambda h: h.assigned_at)

    def correct_setup(self, setup: "StationSetup", *, curvature_refraction: bool = False) -> dict[str, int]:
        """Store a corrected setup and recompute every find and level point shot from it, in one transaction.

        Raw shots are kept, so the new coordinates come from the same readings; returns how many rows moved.
        """
        from .records import Find, LevelPoint, Shot, StationSetup
        from .survey.recompute import shot_positions

        moved = {"find": 0, "level_point": 0}
        setup = check(StationSetup, setup)
        with self.atomic() as conn:
            self.save_versioned(conn, setup, new=False)
            shots = list(db.select(conn, Shot, setup_id=setup.id))
            positions = shot_positions(setup, shots, curvature_refraction=curvature_refraction)
            for model, key in ((Find, "find"), (LevelPoint, "level_point")):
                for shot_id, (e, n, z) in positions.items():
                    for rec in list(db.select(conn, model, shot_id=shot_id)):  # type: ignore[arg-type]
                        self.save_versioned(conn, rec.model_copy(update={"e": e, "n": n, "z": z}), new=False)
                        moved[key] += 1
        return moved

    def site_data(self, *, site_id: "uuid.UUID | None" = None, only_find: "uuid.UUID | None" = None) -> "SiteData":
        """Everything validation reads, for one site (the first when not given), finds as columns.

        ``only_find`` narrows the finds to that one and any sharing its number (what a live check needs).
        """
        from .records import (
            AgeDetermination, GnssFix, Horizon, LevelPoint, Relation, Site, Spit, StationSetup, Trench, Unit,
        )
        from .strata.data import FIND_COLUMNS, FindColumns, SiteData

        with self.read() as conn:
            sites = list(db.select(conn, Site))
            if not sites:
                raise RecordNotFound("this store holds no site yet; set the site up (or sync) first")
            site = next((s for s in sites if s.id == site_id), None) if site_id else sites[0]
            if site is None:
                raise RecordNotFound(f"no site has id {site_id}")
            units = list(db.select(conn, Unit, site_id=site.id, order_by="code"))
            unit_ids = {u.id for u in units}
            all_units = set(conn.execute(sa.select(metadata.tables["unit"].c.id)).scalars())
            trenches = list(db.select(conn, Trench, site_id=site.id, order_by="code"))
            setups = list(db.select(conn, StationSetup, site_id=site.id))
            t = metadata.tables["find"]
            q = sa.select(*(t.c[c] for c in FIND_COLUMNS)).where(t.c.site_id == site.id)
            if only_find is not None:
                number = sa.select(t.c.number).where(t.c.id == only_find).scalar_subquery()
                q = q.where(t.c.number == number)
            rows = conn.execute(q)
            return SiteData(
                site=site, trenches=trenches, units=units,
                relations=list(db.select(conn, Relation, site_id=site.id)),
                horizons=list(db.select(conn, Horizon, site_id=site.id)),
                level_points=[lp for lp in db.select(conn, LevelPoint)
                              if lp.unit_id in unit_ids or lp.unit_id not in all_units],
                spits=[s for s in db.select(conn, Spit) if s.unit_id in unit_ids],
                setups=setups, gnss_fixes=list(db.select(conn, GnssFix, site_id=site.id)),
                ages=list(db.select(conn, AgeDetermination, site_id=site.id)),
                finds=FindColumns.from_rows(rows),
            )
