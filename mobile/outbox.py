"""The tablet's outbox: its own unsent versions cut into numbered batches once, so a retry (over the Wi-Fi or
in a bundle) always carries the very same batch."""

from __future__ import annotations

import sqlalchemy as sa

from schema.sync import Version
from schema.sync.replica import load_identity, row_to_version, state_get, state_set
from schema.sync.tables import field_version

from .store import TabletStore

__all__ = ["acked", "batch_versions", "cut_batches", "mark_acked", "unacked_batches"]


def cut_batches(store: TabletStore, *, size: int = 500) -> int:
    """Number the unsent versions into batches of ``size``; returns the last batch number."""
    with store.atomic() as conn:
        me = load_identity(conn).device
        last = int(state_get(conn, "last_batch", "0") or 0)
        ids = conn.execute(sa.select(field_version.c.id).where(field_version.c.device == me,
                                                                field_version.c.batch.is_(None))
                           .order_by(field_version.c.seq)).scalars().all()
        for i in range(0, len(ids), size):
            last += 1
            conn.execute(field_version.update().where(field_version.c.id.in_(ids[i:i + size])).values(batch=last))
        state_set(conn, "last_batch", last)
    return last


def batch_versions(store: TabletStore, number: int) -> list[Version]:
    with store.read() as conn:
        me = load_identity(conn).device
        rows = conn.execute(sa.select(field_version).where(field_version.c.batch == number, field_version.c.device == me)
                            .order_by(field_version.c.seq)).all()
    return [row_to_version(r) for r in rows]


def acked(store: TabletStore) -> int:
    with store.read() as conn:
        return int(state_get(conn, "acked_batch", "0") or 0)


def mark_acked(store: TabletStore, number: int) -> None:
    with store.atomic() as conn:
        state_set(conn, "acked_batch", max(number, int(state_get(conn, "acked_batch", "0") or 0)))


def unacked_batches(store: TabletStore) -> list[int]:
    with store.read() as conn:
        last = int(state_get(conn, "last_batch", "0") or 0)
        done = int(state_get(conn, "acked_batch", "0") or 0)
    return list(range(done + 1, last + 1))
