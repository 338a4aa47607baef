"""Sync core: field versions, the hybrid logical clock and the merge rules (pure)."""

from __future__ import annotations

from .clock import Clock, Stamp
from .merge import Conflict, MergeResult, VersionSet, leaves, merge, winner
from .versions import LOCAL_ONLY, SERVER_OWNED, SET_FIELDS, Version, batch_hash, version_id

__all__ = ["LOCAL_ONLY", "SERVER_OWNED", "SET_FIELDS", "batch_hash", "Clock", "Conflict", "MergeResult", "Stamp", "Version", "VersionSet", "leaves", "merge",
           "version_id", "winner"]
