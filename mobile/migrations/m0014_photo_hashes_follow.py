"""Tablet file migration 0014: every find's ``photo_hashes`` follows its photo records (issue 19).

Photos taken before ``save_photo`` added the hash to its find left the find's ``photo_hashes`` without it. This
step marks a data step due; once the file has every migration, ``after_upgrade`` runs
``mobile.photos.follow_photo_hashes`` once: each find photographed gains the hashes of its photos that
are not voided (and loses those of voided ones), through the store's versioned save
(``RecordStore.save_versioned``), so the change syncs to the camp like an edit on the tablet. No table changes.
"""

from __future__ import annotations

import uuid

from sqlalchemy.engine import Connection

from schema.store import RecordStore

NAME = "0014_photo_hashes_follow"


class _ThisConnection(RecordStore):
    """The versioned save of a tablet store, on the migration's own connection (no engine of its own)."""

    def __init__(self, device: str | None):
        self._device = uuid.UUID(device) if device else None

    def default_device(self) -> uuid.UUID | None:
        return self._device


def apply(conn: Connection) -> None:
    from . import AFTER_KEY

    conn.exec_driver_sql("INSERT OR REPLACE INTO local_setting (key, value) VALUES (?, 'due')", (AFTER_KEY + NAME,))


def after_upgrade(conn: Connection) -> None:
    from mobile.photos import follow_photo_hashes

    device = conn.exec_driver_sql("SELECT value FROM local_setting WHERE key = 'device_id'").scalar()
    follow_photo_hashes(conn, _ThisConnection(device).save_versioned)
