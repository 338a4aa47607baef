"""Tablet file migration 0009: safety checks (shoring at depth, possible human remains, laser class, heat), and
the tablet's own table of live-check results per find."""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0009_safety_checks"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql(
        """CREATE TABLE safety_check (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    trench_id CHAR(32),
    unit_id CHAR(32),
    find_id CHAR(32),
    kind VARCHAR(32) NOT NULL,
    depth_m DOUBLE,
    answer VARCHAR NOT NULL,
    notified VARCHAR,
    recorder VARCHAR NOT NULL,
    checked_at DATETIME NOT NULL,
    CONSTRAINT pk_safety_check PRIMARY KEY (id),
    CONSTRAINT fk_safety_check_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT fk_safety_check_trench_id_trench FOREIGN KEY(trench_id) REFERENCES trench (id),
    CONSTRAINT fk_safety_check_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id),
    CONSTRAINT fk_safety_check_find_id_find FOREIGN KEY(find_id) REFERENCES find (id),
    CONSTRAINT ck_safety_check_kind CHECK (kind IN ('shoring', 'human_remains', 'laser', 'heat'))
)"""
    )
    conn.exec_driver_sql("CREATE INDEX ix_safety_check_trench_id ON safety_check (trench_id)")
    conn.exec_driver_sql(
        """CREATE TABLE live_check (
    find_id CHAR(32) NOT NULL,
    code VARCHAR(64) NOT NULL,
    severity VARCHAR(16) NOT NULL,
    message VARCHAR NOT NULL,
    fix VARCHAR NOT NULL,
    confirmed_reason VARCHAR,
    CONSTRAINT pk_live_check PRIMARY KEY (find_id, code)
)"""
    )
