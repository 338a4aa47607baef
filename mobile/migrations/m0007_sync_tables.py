"""Tablet file migration 0007: the sync layer (version log, sync state, pending rows, open conflicts).

Rows already in an older file have no versions yet; ``TabletStore.open`` gives them their first versions after
the upgrade (with the current record shapes), so nothing recorded before it is left out of the next push.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0007_sync_tables"

DDL = """
CREATE TABLE field_version (
    id VARCHAR(80) NOT NULL,
    record VARCHAR(40) NOT NULL,
    record_id CHAR(32) NOT NULL,
    field VARCHAR(60) NOT NULL,
    value JSON,
    wall_ms BIGINT NOT NULL,
    counter BIGINT NOT NULL,
    device CHAR(32) NOT NULL,
    seq BIGINT NOT NULL,
    parents JSON NOT NULL,
    schema_version INTEGER NOT NULL,
    batch BIGINT,
    log_seq BIGINT,
    CONSTRAINT pk_field_version PRIMARY KEY (id),
    CONSTRAINT uq_field_version_log_seq UNIQUE (log_seq)
);

CREATE INDEX ix_field_version_device_batch ON field_version (device, batch);

CREATE INDEX ix_field_version_record_id_field ON field_version (record_id, field);

CREATE TABLE open_conflict (
    record VARCHAR(40) NOT NULL,
    record_id CHAR(32) NOT NULL,
    field VARCHAR(60) NOT NULL,
    leaves JSON NOT NULL,
    CONSTRAINT pk_open_conflict PRIMARY KEY (record, record_id, field)
);

CREATE TABLE pending_row (
    record VARCHAR(40) NOT NULL,
    record_id CHAR(32) NOT NULL,
    reason VARCHAR NOT NULL,
    CONSTRAINT pk_pending_row PRIMARY KEY (record, record_id)
);

CREATE TABLE sync_state (
    "key" VARCHAR(40) NOT NULL,
    value VARCHAR NOT NULL,
    CONSTRAINT pk_sync_state PRIMARY KEY ("key")
);
"""


def apply(conn: Connection) -> None:
    for statement in DDL.split(";\n"):
        if statement.strip():
            conn.exec_driver_sql(statement)
