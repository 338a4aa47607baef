"""Tablet file migration 0002: the human-remains flag and the label-printed time on finds.

Existing finds get ``human_remains = 0`` (not flagged) and no printed-label time.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0002_find_flags"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE find ADD COLUMN human_remains BOOLEAN NOT NULL DEFAULT 0")
    conn.exec_driver_sql("ALTER TABLE find ADD COLUMN label_printed_at DATETIME")
