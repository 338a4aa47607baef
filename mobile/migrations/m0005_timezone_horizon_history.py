"""Tablet file migration 0005: the site's time zone, and the history of horizon assignments.

Existing sites get 'UTC' until the data manager sets their zone; existing horizon assignments have no history
rows (the history starts with this version).
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0005_timezone_horizon_history"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE site ADD COLUMN timezone VARCHAR NOT NULL DEFAULT 'UTC'")
    conn.exec_driver_sql(
        """CREATE TABLE horizon_assignment (
    id CHAR(32) NOT NULL,
    unit_id CHAR(32) NOT NULL,
    horizon_id CHAR(32),
    assigned_by VARCHAR NOT NULL,
    assigned_at DATETIME NOT NULL,
    note VARCHAR NOT NULL,
    CONSTRAINT pk_horizon_assignment PRIMARY KEY (id),
    CONSTRAINT fk_horizon_assignment_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id),
    CONSTRAINT fk_horizon_assignment_horizon_id_horizon FOREIGN KEY(horizon_id) REFERENCES horizon (id)
)"""
    )
    conn.exec_driver_sql("CREATE INDEX ix_horizon_assignment_unit_id ON horizon_assignment (unit_id)")
