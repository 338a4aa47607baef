"""Baulk's tablet side: the local store, and (in later modules) screens, controllers, instrument readers,
sync client and labels. Kivy is imported only by the screen modules, never by the store or controllers.
"""

from __future__ import annotations

from .store import TabletStore

__all__ = ["TabletStore"]
