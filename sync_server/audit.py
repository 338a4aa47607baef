"""The audit trail: every field version is a change by one device at one time, so the change log answers
"who changed what, and when" without a table of its own."""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Any

import sqlalchemy as sa

from schema.records import Device
from schema.sync.tables import field_version

from .store import ServerStore

__all__ = ["changes"]


def changes(store: ServerStore, *, record: str | None = None, record_id: uuid.UUID | None = None,
            device: str | None = None, since: dt.datetime | None = None, limit: int = 500,
            after: int = 0) -> list[dict[str, Any]]:
    """Field versions in change-log order after position ``after``, with the device's label and the time."""
    devices = {d.id: d.label for d in store.list(Device)}
    q = sa.select(field_version).where(field_version.c.log_seq > after)
    if record:
        q = q.where(field_version.c.record == record)
    if record_id:
        q = q.where(field_version.c.record_id == record_id)
    if device:
        ids = [i for i, label in devices.items() if label == device or str(i) == device]
        q = q.where(field_version.c.device.in_(ids))
    if since:
        since = since if since.tzinfo else since.replace(tzinfo=dt.timezone.utc)
        q = q.where(field_version.c.wall_ms >= int(since.timestamp() * 1000))
    with store.read() as conn:
        rows = conn.execute(q.order_by(field_version.c.log_seq).limit(limit)).all()
    return [{"version": r.id, "record": r.record, "record_id": str(r.record_id), "field": r.field, "value": r.value,
             "device": devices.get(r.device, str(r.device)), "position": r.log_seq,
             "at": dt.datetime.fromtimestamp(r.wall_ms / 1000, dt.timezone.utc).isoformat()} for r in rows]
