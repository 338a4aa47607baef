"""What only PostgreSQL shows: isolation level and migrations on a real server (the shared store tests run
there too, through the ``server_url`` fixture)."""

from __future__ import annotations

import pytest

from sync_server.store import ServerStore, current_revision, head_revision

pytestmark = pytest.mark.pg


def test_runs_at_read_committed(pg_database: str) -> None:
    with ServerStore.open(pg_database) as store:
        assert store.backend == "postgresql"
        with store.engine.connect() as conn:
            assert conn.exec_driver_sql("SHOW transaction_isolation").scalar() == "read committed"


def test_migrations_are_idempotent(pg_database: str) -> None:
    ServerStore.open(pg_database).close()
    with ServerStore.open(pg_database) as store:
        assert current_revision(store.engine) == head_revision()
        with store.engine.connect() as conn:
            checks = conn.exec_driver_sql(
                "SELECT conname FROM pg_constraint WHERE conrelid = 'find'::regclass AND contype = 'c'"
            ).scalars().all()
    assert "ck_find_category" in checks
