"""The server database's tables: every record table (derived from the models, as on the tablet) plus the
tables only the server keeps. Alembic compares migrations against ``server_metadata``."""

from __future__ import annotations

import sqlalchemy as sa

from schema.sync.tables import sync_metadata
from schema.tables import UTCDateTime, build_metadata

__all__ = ["backup_log", "enrolment_code", "push_batch", "server_metadata", "validation_issue"]

server_metadata = build_metadata()
for _t in sync_metadata.tables.values():
    _t.to_metadata(server_metadata)

# Each (device, batch) applied once: the same batch again gets this stored acknowledgement.
push_batch = sa.Table(
    "push_batch", server_metadata,
    sa.Column("device", sa.Uuid(), primary_key=True),
    sa.Column("batch", sa.BigInteger(), primary_key=True),
    sa.Column("content_hash", sa.String(64), nullable=False),
    sa.Column("ack", sa.JSON(), nullable=False),
    sa.Column("received_at", UTCDateTime(), nullable=False),
    comment="Push batches applied, with the acknowledgement each got",
)

# The latest validation run's issues, keyed by the issue's stable key so acceptance survives re-runs.
validation_issue = sa.Table(
    "validation_issue", server_metadata,
    sa.Column("key", sa.String(), primary_key=True, comment="code:record:detail, stable across runs"),
    sa.Column("code", sa.String(40), nullable=False),
    sa.Column("severity", sa.String(10), nullable=False),
    sa.Column("record", sa.String(40), nullable=False),
    sa.Column("record_id", sa.String(), nullable=True),
    sa.Column("label", sa.String(), nullable=False),
    sa.Column("message", sa.String(), nullable=False),
    sa.Column("fix", sa.String(), nullable=False),
    sa.Column("value", sa.String(), nullable=True),
    sa.Column("site_id", sa.Uuid(), nullable=False),
    sa.Column("trench", sa.String(), nullable=True, comment="trench code of the record, for filtering"),
    sa.Column("unit", sa.String(), nullable=True, comment="unit code of the record, for filtering"),
    sa.Column("first_seen_at", UTCDateTime(), nullable=False),
    sa.Column("last_seen_at", UTCDateTime(), nullable=False),
    sa.Column("open", sa.Boolean(), nullable=False, comment="still reported by the latest run"),
    sa.Column("accepted_at", UTCDateTime(), nullable=True),
    sa.Column("accepted_by", sa.String(), nullable=True),
    sa.Column("accepted_reason", sa.String(), nullable=True),
    sa.Index(None, "code"),
    sa.Index(None, "record_id"),
    comment="Validation issues of the latest run, with managers' acceptances",
)

# One-time enrolment codes: only a SHA-256 of the code is kept; a code works once, before it expires.
enrolment_code = sa.Table(
    "enrolment_code", server_metadata,
    sa.Column("code_hash", sa.String(64), primary_key=True, comment="SHA-256 of the normalised code"),
    sa.Column("device_id", sa.Uuid(), sa.ForeignKey("device.id"), nullable=False,
              comment="the device the code enrols (made when the code is)"),
    sa.Column("created_at", UTCDateTime(), nullable=False),
    sa.Column("expires_at", UTCDateTime(), nullable=False),
    sa.Column("used_at", UTCDateTime(), nullable=True),
    sa.Column("created_by", sa.String(), nullable=False, comment="who made it: a manager device's label, or 'console'"),
    comment="One-time enrolment codes for new devices",
)

# Every backup ``baulk backup`` wrote of this store and verified; the Today page shows the newest and warns when it
# is old (``sync_server.backup``). Kept in the store rather than read from a folder: the server learns of a backup
# wherever it went (a USB stick taken away, another disk) with nothing more to configure.
backup_log = sa.Table(
    "backup_log", server_metadata,
    sa.Column("id", sa.Uuid(), primary_key=True),
    sa.Column("made_at", UTCDateTime(), nullable=False, comment="the moment of the snapshot the backup holds (UTC)"),
    sa.Column("path", sa.String(), nullable=False, comment="the backup file as written (absolute path)"),
    sa.Column("bytes", sa.BigInteger(), nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False, comment="SHA-256 of the backup file"),
    sa.Index(None, "made_at"),
    comment="Verified backups of this store",
)
