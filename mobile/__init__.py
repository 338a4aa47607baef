"""Baulk's tablet side: the local store, controllers, instrument readers, labels, the sync client and (under
``mobile.ui``) the Kivy screens. Kivy is imported only by ``mobile.ui``, never by the store or controllers.
"""

from __future__ import annotations

from .store import TabletStore

__all__ = ["TabletStore"]
