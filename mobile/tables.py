"""The tablet file's tables: every record table plus the sync layer's (the migrations must build exactly these;
``tests/mobile/test_migrations.py`` checks it). The tablet's own bookkeeping tables (``baulk_migration``,
``local_setting``) are created by the migrations alone."""

from __future__ import annotations

from schema.sync.tables import sync_metadata
from schema.tables import build_metadata

__all__ = ["tablet_metadata"]

tablet_metadata = build_metadata()
for _t in sync_metadata.tables.values():
    _t.to_metadata(tablet_metadata)
