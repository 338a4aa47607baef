"""Sync core: field versions, the hybrid logical clock and the merge rules (pure)."""

from __future__ import annotations

from .clock import Clock, Stamp
from .merge import (
    VOID_FIELD, Conflict, MergeResult, VersionSet, edit_parents, leaves, merge, resolution_parents, void_parents, winner,
)
from .versions import LOCAL_ONLY, SERVER_OWNED, SET_FIELDS, Version, batch_hash, version_id

__all__ = ["LOCAL_ONLY", "SERVER_OWNED", "SET_FIELDS", "VOID_FIELD", "batch_hash", "Clock", "Conflict", "MergeResult",
           "Stamp", "Version", "VersionSet", "edit_parents", "leaves", "merge", "resolution_parents", "version_id",
           "void_parents", "winner"]
