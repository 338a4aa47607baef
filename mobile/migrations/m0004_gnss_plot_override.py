"""Tablet file migration 0004: the recorder's reason for accepting a GNSS fix that is not RTK fixed."""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0004_gnss_plot_override"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE gnss_fix ADD COLUMN plot_override_reason VARCHAR")
