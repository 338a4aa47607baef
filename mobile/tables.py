"""The tablet file's tables: every record table plus the sync layer's and the tablet's own ``live_check``
(the migrations must build exactly these; ``tests/mobile/test_migrations.py`` checks it). The bookkeeping
tables (``baulk_migration``, ``local_setting``) are created by the migrations alone."""

from __future__ import annotations

import sqlalchemy as sa

from schema.sync.tables import sync_metadata
from schema.tables import build_metadata

__all__ = ["live_check", "tablet_metadata"]

tablet_metadata = build_metadata()
for _t in sync_metadata.tables.values():
    _t.to_metadata(tablet_metadata)

# The live checks' last word on each find, kept on the tablet only (the server runs the same rules itself):
# which checks the find fails now, and the recorder's reason where it was confirmed as it is.
live_check = sa.Table(
    "live_check", tablet_metadata,
    sa.Column("find_id", sa.Uuid(), nullable=False),
    sa.Column("code", sa.String(64), nullable=False),
    sa.Column("severity", sa.String(16), nullable=False),
    sa.Column("message", sa.String(), nullable=False),
    sa.Column("fix", sa.String(), nullable=False),
    sa.Column("confirmed_reason", sa.String(), nullable=True),
    sa.PrimaryKeyConstraint("find_id", "code", name="pk_live_check"),
)
