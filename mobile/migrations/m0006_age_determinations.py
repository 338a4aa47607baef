"""Tablet file migration 0006: age determinations on units (from samples or correlated marker beds)."""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0006_age_determinations"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql(
        """CREATE TABLE age_determination (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    unit_id CHAR(32) NOT NULL,
    find_id CHAR(32),
    method VARCHAR(32) NOT NULL,
    age_ka DOUBLE NOT NULL,
    sigma_ka DOUBLE NOT NULL,
    lab_code VARCHAR,
    note VARCHAR NOT NULL,
    CONSTRAINT pk_age_determination PRIMARY KEY (id),
    CONSTRAINT fk_age_determination_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT fk_age_determination_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id),
    CONSTRAINT fk_age_determination_find_id_find FOREIGN KEY(find_id) REFERENCES find (id),
    CONSTRAINT ck_age_determination_method CHECK (method IN ('radiocarbon', 'argon_argon', 'luminescence',
        'tephra_correlation', 'uranium_series', 'other'))
)"""
    )
    conn.exec_driver_sql("CREATE INDEX ix_age_determination_unit_id ON age_determination (unit_id)")
