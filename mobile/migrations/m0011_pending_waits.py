"""Tablet file migration 0011: a pending row says what it waits for.

``pending_row`` gains ``waits_for`` (a missing parent ``<record>:<id>``, ``table:<record>``, ``schema:<n>`` or
``edit``), indexed, so a sync retries only the pending rows whose wait is over instead of every one of them.
Rows already pending keep NULL there and are retried once, which gives them their wait.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0011_pending_waits"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE pending_row ADD COLUMN waits_for VARCHAR(120)")
    conn.exec_driver_sql("CREATE INDEX ix_pending_row_waits_for ON pending_row (waits_for)")
