"""Ordered, recorded migrations of the tablet's SQLite file.

Each migration is a module with ``NAME`` and ``apply(conn)``; ``MIGRATIONS`` lists them in order. Applied names
are recorded in ``baulk_migration``; ``pending()`` and ``applied()`` are read-only. ``upgrade()`` applies every
pending step in one transaction, so a failed step leaves the file exactly as it was. A file whose recorded
migrations are not a prefix of this list was written by a newer Baulk and is refused rather than touched.

A data step that reads or saves records (through the versioned save, so it syncs) goes in the migration's
``after_upgrade(conn)``; its ``apply`` marks it due (``AFTER_KEY``), and it runs once the file has every migration,
so it always sees the records in their newest shape.

To change the tablet's tables: change the model in ``schema/records``, then add the next ``mNNNN_*.py`` here
that brings an old file to the new shape (``tests/mobile/test_migrations.py`` checks the two agree).
"""

from __future__ import annotations

import datetime as dt
from types import ModuleType

from sqlalchemy.engine import Connection

from schema.errors import MigrationFailed, StoreTooNew

from . import (
    m0001_initial, m0002_find_flags, m0003_site_grid_polynomial, m0004_gnss_plot_override,
    m0005_timezone_horizon_history, m0006_age_determinations, m0007_sync_tables, m0008_number_clashes_visible,
    m0009_safety_checks, m0010_site_setup_and_corrections, m0011_pending_waits, m0012_photos, m0013_relation_void,
    m0014_photo_hashes_follow,
)

__all__ = ["MIGRATIONS", "applied", "pending", "upgrade"]

MIGRATIONS: tuple[ModuleType, ...] = (
    m0001_initial, m0002_find_flags, m0003_site_grid_polynomial, m0004_gnss_plot_override,
    m0005_timezone_horizon_history, m0006_age_determinations, m0007_sync_tables, m0008_number_clashes_visible,
    m0009_safety_checks, m0010_site_setup_and_corrections, m0011_pending_waits, m0012_photos, m0013_relation_void,
    m0014_photo_hashes_follow,
)

_TABLE = """CREATE TABLE IF NOT EXISTS baulk_migration (
    name VARCHAR PRIMARY KEY,
    applied_at VARCHAR NOT NULL
)"""


def applied(conn: Connection) -> list[str]:
    """Names of the migrations recorded in this file, in the order applied."""
    has = conn.exec_driver_sql(
        "SELECT 1 FROM sqlite_master WHERE type='table' AND name='baulk_migration'"
    ).first()
    if not has:
        return []
    return [r[0] for r in conn.exec_driver_sql("SELECT name FROM baulk_migration ORDER BY rowid")]


def pending(conn: Connection) -> list[str]:
    """Names of the migrations this file still needs."""
    done = applied(conn)
    known = [m.NAME for m in MIGRATIONS]
    if done != known[: len(done)]:
        extra = [n for n in done if n not in known]
        raise StoreTooNew(
            f"this tablet file has migrations this Baulk does not know ({', '.join(extra) or 'in another order'}); "
            "update Baulk on this tablet before opening it"
        )
    return known[len(done):]


def upgrade(conn: Connection, *, until: str | None = None) -> list[str]:
    """Apply pending migrations (up to and including ``until``) in the caller's transaction."""
    conn.exec_driver_sql(_TABLE)
    todo = pending(conn)
    if until is not None:
        todo = todo[: todo.index(until) + 1] if until in todo else []
    by_name = {m.NAME: m for m in MIGRATIONS}
    for name in todo:
        try:
            with conn.begin_nested():
                by_name[name].apply(conn)
        except Exception as exc:  # noqa: BLE001 - reported with the step that failed
            raise MigrationFailed(
                f"tablet file upgrade step {name} failed ({exc}); the file was left unchanged. "
                "Keep the file and send it to the data manager"
            ) from exc
        conn.exec_driver_sql(
            "INSERT INTO baulk_migration (name, applied_at) VALUES (?, ?)",
            (name, dt.datetime.now(dt.timezone.utc).isoformat()),
        )
    if not pending(conn):
        _after_upgrade(conn)
    return todo


AFTER_KEY = "migration_after:"
"""A local setting ``migration_after:<NAME>`` marks a data step still due (its migration's ``after_upgrade``)."""


def _after_upgrade(conn: Connection) -> None:
    """Run the data steps that need the records in their newest shape (``after_upgrade(conn)`` of a migration
    whose ``apply`` marked it due), once the file has every migration; each runs once: its mark goes with it."""
    for module in MIGRATIONS:
        step = getattr(module, "after_upgrade", None)
        key = AFTER_KEY + module.NAME
        if step is None or conn.exec_driver_sql("SELECT 1 FROM local_setting WHERE key = ?", (key,)).first() is None:
            continue
        try:
            with conn.begin_nested():
                step(conn)
                conn.exec_driver_sql("DELETE FROM local_setting WHERE key = ?", (key,))
        except Exception as exc:  # noqa: BLE001 - reported with the step that failed
            raise MigrationFailed(
                f"tablet file upgrade step {module.NAME} (its data step) failed ({exc}); the file was left "
                "unchanged. Keep the file and send it to the data manager"
            ) from exc
