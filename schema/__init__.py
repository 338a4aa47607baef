"""Baulk's shared core: record models, derived tables, validation, and (in later modules) survey math,
stratigraphy rules and merge rules. Plain data and pure functions; no Kivy, no FastAPI, no HTTP client.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

from . import errors, vocab
from .errors import BaulkError, RecordInvalid
from .munsell import parse_munsell
from .records import REGISTRY
from .validation import check

__all__ = [
    "REGISTRY", "SCHEMA_VERSION", "BaulkError", "RecordInvalid", "__version__", "check", "errors",
    "parse_munsell", "vocab",
]

# Version of the record shapes carried by every synced version (DESIGN.md section 3, "Late, old tablets").
SCHEMA_VERSION = 1

try:
    __version__ = version("baulk")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0.0.0+source"
