"""Sync core: field versions, the hybrid logical clock and the merge rules (pure)."""

from __future__ import annotations

from .clock import Clock, Stamp
from .merge import Conflict, MergeResult, VersionSet, leaves, merge, winner
from .versions import SET_FIELDS, Version, version_id

__all__ = ["SET_FIELDS", "Clock", "Conflict", "MergeResult", "Stamp", "Version", "VersionSet", "leaves", "merge",
           "version_id", "winner"]
