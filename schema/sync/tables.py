"""Tables of the sync layer, the same on tablet and server: the version log, the replica's own state, rows a
merge could not make visible yet, and open conflicts. (The server adds its push-batch table.)"""

from __future__ import annotations

import sqlalchemy as sa

from ..tables import NAMING

__all__ = ["field_version", "open_conflict", "pending_row", "sync_metadata", "sync_state"]

sync_metadata = sa.MetaData(naming_convention=NAMING)

field_version = sa.Table(
    "field_version", sync_metadata,
    sa.Column("id", sa.String(80), primary_key=True, comment="<device>:<device sequence>"),
    sa.Column("record", sa.String(40), nullable=False),
    sa.Column("record_id", sa.Uuid(), nullable=False),
    sa.Column("field", sa.String(60), nullable=False),
    sa.Column("value", sa.JSON(), nullable=True),
    sa.Column("wall_ms", sa.BigInteger(), nullable=False),
    sa.Column("counter", sa.BigInteger(), nullable=False),
    sa.Column("device", sa.Uuid(), nullable=False),
    sa.Column("seq", sa.BigInteger(), nullable=False),
    sa.Column("parents", sa.JSON(), nullable=False),
    sa.Column("schema_version", sa.Integer(), nullable=False),
    sa.Column("batch", sa.BigInteger(), nullable=True, comment="tablet: the push batch that carries it (NULL: unsent)"),
    sa.Column("log_seq", sa.BigInteger(), nullable=True, unique=True, comment="server: position in the change log"),
    sa.Index(None, "record_id", "field"),
    sa.Index(None, "device", "batch"),
    comment="Every field version this replica holds; only ever grows",
)

sync_state = sa.Table(
    "sync_state", sync_metadata,
    sa.Column("key", sa.String(40), primary_key=True),
    sa.Column("value", sa.String(), nullable=False),
    comment="This replica's sync identity, sequence, clock and cursors",
)

pending_row = sa.Table(
    "pending_row", sync_metadata,
    sa.Column("record", sa.String(40), primary_key=True),
    sa.Column("record_id", sa.Uuid(), primary_key=True),
    sa.Column("reason", sa.String(), nullable=False),
    sa.Column("waits_for", sa.String(120), nullable=True,
              comment="what must happen first: '<record>:<id>' a missing parent row, 'table:<record>' a change to "
                      "that table (a clash), 'schema:<n>' a Baulk that reads schema n, 'edit' a new value of this "
                      "record; NULL: written by an older Baulk, retried once"),
    sa.Index(None, "waits_for"),
    comment="Records whose versions are kept but whose visible row cannot be written yet (a missing parent, a clash)",
)

open_conflict = sa.Table(
    "open_conflict", sync_metadata,
    sa.Column("record", sa.String(40), primary_key=True),
    sa.Column("record_id", sa.Uuid(), primary_key=True),
    sa.Column("field", sa.String(60), primary_key=True),
    sa.Column("leaves", sa.JSON(), nullable=False, comment="competing version ids, highest first"),
    sa.Column("kind", sa.String(20), nullable=False, server_default="concurrent",
              comment="concurrent | void (edits the void did not see) | duplicate_number (finds sharing a number)"),
    comment="Fields with more than one current value, for the data manager",
)
