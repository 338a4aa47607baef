"""Baulk's camp server: the server store, the HTTP app, the ``baulk`` command line and the demo."""

from __future__ import annotations

__all__: list[str] = []
