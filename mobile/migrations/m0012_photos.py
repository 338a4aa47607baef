"""Tablet file migration 0012: the photo register (``photo``: one row per picture; its file is kept by hash in
the tablet's photo folder, see ``mobile/photos.py``)."""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0012_photos"


def apply(conn: Connection) -> None:
    conn.exec_driver_sql(
        """CREATE TABLE photo (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    sha256 VARCHAR NOT NULL,
    number BIGINT NOT NULL,
    device_id CHAR(32),
    subject VARCHAR(32) NOT NULL,
    subject_id CHAR(32),
    trench_id CHAR(32),
    caption VARCHAR NOT NULL,
    facing VARCHAR(32),
    scale_in_frame BOOLEAN NOT NULL,
    north_arrow_in_frame BOOLEAN NOT NULL,
    taken_at DATETIME NOT NULL,
    "by" VARCHAR NOT NULL,
    width_px BIGINT NOT NULL,
    height_px BIGINT NOT NULL,
    bytes BIGINT NOT NULL,
    voided BOOLEAN NOT NULL,
    void_reason VARCHAR,
    CONSTRAINT pk_photo PRIMARY KEY (id),
    CONSTRAINT fk_photo_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT ck_photo_subject CHECK (subject IN ('find', 'unit', 'trench', 'level', 'day')),
    CONSTRAINT fk_photo_trench_id_trench FOREIGN KEY(trench_id) REFERENCES trench (id),
    CONSTRAINT ck_photo_facing CHECK (facing IN ('N', 'NE', 'E', 'SE', 'S', 'SW', 'W', 'NW', 'down'))
)"""
    )
    conn.exec_driver_sql("CREATE INDEX ix_photo_sha256 ON photo (sha256)")
    conn.exec_driver_sql("CREATE INDEX ix_photo_device_id_number ON photo (device_id, number)")
    conn.exec_driver_sql("CREATE INDEX ix_photo_subject_id ON photo (subject_id)")
