"""Tablet file migration 0003: the site's fitted lat/lon -> grid polynomial (for tablets without PROJ).

Existing sites get none; the camp server supplies it at the next sync.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0003_site_grid_polynomial"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE site ADD COLUMN grid_polynomial JSON")
