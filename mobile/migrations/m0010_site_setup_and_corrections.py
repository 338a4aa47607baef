"""Tablet file migration 0010: what a real site's set-up file gives (the country code and the find-number block
size on the site, lithostratigraphic names on horizons), and camp corrections with their reasons.

Existing sites get no country, a 5 cm grid tolerance and blocks of 500 (what the camp server issued before); existing horizons no names.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0010_site_setup_and_corrections"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql("ALTER TABLE site ADD COLUMN country_code VARCHAR")
    conn.exec_driver_sql("ALTER TABLE site ADD COLUMN grid_tolerance_m DOUBLE NOT NULL DEFAULT 0.05")
    conn.exec_driver_sql("ALTER TABLE site ADD COLUMN number_block_size BIGINT NOT NULL DEFAULT 500")
    for name in ("formation", "member", "bed"):
        conn.exec_driver_sql(f"ALTER TABLE horizon ADD COLUMN {name} VARCHAR")
    conn.exec_driver_sql(
        """CREATE TABLE correction (
    id CHAR(32) NOT NULL,
    record VARCHAR(32) NOT NULL,
    record_id CHAR(32) NOT NULL,
    fields VARCHAR NOT NULL,
    reason VARCHAR NOT NULL,
    "by" VARCHAR NOT NULL,
    at DATETIME NOT NULL,
    CONSTRAINT pk_correction PRIMARY KEY (id),
    CONSTRAINT ck_correction_record CHECK (record IN ('find', 'unit'))
)"""
    )
    conn.exec_driver_sql("CREATE INDEX ix_correction_record_id ON correction (record_id)")
