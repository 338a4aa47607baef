"""Stratigraphy and validation: the Harris matrix, unit assignment, positions, horizons and quality rules.

Pure functions over plain data (``SiteData``); the tablet runs them live on what it holds, the server after
every merge. Problems become ``Issue`` values with stable codes (``issues.CATALOGUE``); nothing here raises
on bad data.
"""

from __future__ import annotations

from .data import FindColumns, SiteData
from .issues import CATALOGUE, Issue
from .matrix import Matrix, build_matrix
from .validate import Report, validate

__all__ = ["CATALOGUE", "FindColumns", "Issue", "Matrix", "Report", "SiteData", "build_matrix", "validate"]
