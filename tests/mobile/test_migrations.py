"""The tablet file's ordered migrations: an old file upgrades with every row kept."""

from __future__ import annotations

import sqlite3
import uuid

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from mobile import migrations
from mobile.store import TabletStore
from mobile.tables import tablet_metadata
from schema import db
from schema.demo_site import build_site, plan_finds
from schema.errors import MigrationFailed, StoreTooNew
from schema.records import Find, Unit
from schema.tables import metadata


ALL = [m.NAME for m in migrations.MIGRATIONS]


def _old_file(path) -> dict:  # type: ignore[no-untyped-def]
    """A file made by the first migration only, filled the way that version wrote rows."""
    engine = db.sqlite_engine(path)
    demo = build_site()
    plan = plan_finds(demo, label="TAB-1", first_number=1, count=40, seed=3)
    finds = [f for f in plan.finds if f["category"] != "sample"]
    with engine.begin() as conn:
        migrations.upgrade(conn, until="0001_initial")
        records = [*demo.setup_records(), *(Find.model_validate(f) for f in finds)]
        for record in records:
            _insert_as_version_1(conn, record)
    engine.dispose()
    return {"finds": len(finds), "units": len(demo.units)}  # ages came later: not in a version-1 file


def _insert_as_version_1(conn, record) -> None:  # type: ignore[no-untyped-def]
    """Write a record's row with only the columns the first file version had."""
    name = record.record_name
    columns = {r[1] for r in conn.exec_driver_sql(f"PRAGMA table_info({name})")}
    if not columns:
        return  # a record type the first version did not have
    row = {k: v for k, v in db.to_row(record).items() if k in columns}
    conn.execute(metadata.tables[name].insert(), row)


def test_old_file_upgrades_keeping_every_row(tmp_path) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "old.sqlite"
    made = _old_file(path)
    with sqlite3.connect(path) as raw:
        before = raw.execute("SELECT id, number, z, material FROM find ORDER BY number").fetchall()
        assert "human_remains" not in [r[1] for r in raw.execute("PRAGMA table_info(find)")]
    with TabletStore.open(path) as store:
        with store.read() as conn:
            assert migrations.applied(conn) == ALL
        finds = store.list(Find, order_by="number")
        assert len(finds) == made["finds"] and store.count(Unit) == made["units"]
        assert all(f.human_remains is False and f.label_printed_at is None for f in finds)
        assert store.integrity_check() == "ok"
    with sqlite3.connect(path) as raw:
        after = raw.execute("SELECT id, number, z, material FROM find ORDER BY number").fetchall()
    assert after == before


def _records_only(name, type_, _parent) -> bool:  # type: ignore[no-untyped-def]
    """Leave out the tablet's own bookkeeping tables, which no record model describes."""
    return not (type_ == "table" and name in ("baulk_migration", "local_setting"))


def test_migrated_file_matches_the_models(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Migrations and the models describe the same tables (Alembic's schema comparison finds no difference)."""
    with TabletStore.open(tmp_path / "t.sqlite") as store:
        with store.engine.connect() as conn:
            context = MigrationContext.configure(conn, opts={"include_name": _records_only})
            diffs = compare_metadata(context, tablet_metadata)
    assert diffs == []


def test_pending_and_applied_are_read_only(tmp_path) -> None:  # type: ignore[no-untyped-def]
    engine = db.sqlite_engine(tmp_path / "t.sqlite")
    with engine.begin() as conn:
        assert migrations.applied(conn) == []
        assert migrations.pending(conn) == ALL
        migrations.upgrade(conn, until="0001_initial")
        assert migrations.pending(conn) == ALL[1:]
        assert migrations.pending(conn) == ALL[1:]
    engine.dispose()


def test_file_from_a_newer_baulk_is_refused(tmp_path) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "t.sqlite"
    TabletStore.open(path).close()
    with sqlite3.connect(path) as raw:
        raw.execute("INSERT INTO baulk_migration VALUES ('0099_future', '2027-01-01')")
    with pytest.raises(StoreTooNew, match="0099_future"):
        TabletStore.open(path)


def test_failed_step_leaves_the_file_unchanged(tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "old.sqlite"
    _old_file(path)

    def broken(conn) -> None:  # type: ignore[no-untyped-def]
        conn.exec_driver_sql("ALTER TABLE find ADD COLUMN human_remains BOOLEAN NOT NULL DEFAULT 0")
        raise RuntimeError("disk full")

    monkeypatch.setattr(migrations.m0002_find_flags, "apply", broken)
    with pytest.raises(MigrationFailed, match="0002_find_flags failed"):
        TabletStore.open(path)
    with sqlite3.connect(path) as raw:
        assert "human_remains" not in [r[1] for r in raw.execute("PRAGMA table_info(find)")]
        assert [r[0] for r in raw.execute("SELECT name FROM baulk_migration")] == ["0001_initial"]
        assert raw.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    assert uuid  # noqa: B018
