"""Tablet file migration 0013: relations can be voided with a reason (issue 18, item 12).

Existing relations stay in force: ``voided = 0`` and no reason.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0013_relation_void"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE relation ADD COLUMN voided BOOLEAN NOT NULL DEFAULT 0")
    conn.exec_driver_sql("ALTER TABLE relation ADD COLUMN void_reason VARCHAR")
