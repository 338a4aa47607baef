"""The server database's tables: every record table from ``schema.tables`` (server-only tables join here)."""

from __future__ import annotations

from schema.tables import metadata as server_metadata

__all__ = ["server_metadata"]
