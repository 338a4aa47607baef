"""The find list: search (number, material, taxon, notes) and filters (unit, category, today, open checks) over a
recycled list that draws only the rows on screen; tap a row to correct it on Record or to void it.

A row shows its find's newest photo as a thumbnail. The recycled list binds only the rows on screen to their data,
so a thumbnail is asked for only when its row is drawn; it is made (the first time, from the photo's file) on the
thumbnail worker's thread (``mobile.ui.thumbs``) while the row shows a neutral placeholder."""

from __future__ import annotations

import uuid
from functools import partial

from kivy.app import App
from kivy.properties import BooleanProperty, ListProperty, StringProperty
from kivy.uix.button import Button

from ...controllers import FindFilter
from ..thumbs import Ticket, thumbnails
from . import BaulkScreen

__all__ = ["FindRow", "FindsScreen"]

ANY_UNIT, ANY_KIND = "any unit", "any category"
PAGE = 500  # rows fetched at a time: the list opens on the newest 500 and loads more as it is scrolled


class FindRow(Button):
    """One find in the list; ``photo`` (a hash) becomes ``thumb`` (a thumbnail's path) when the worker has made
    it; ``waiting`` (the placeholder) until then. A row the list binds to another find drops its request, and a
    thumbnail that arrives for a photo the row no longer shows is not set."""

    find_id = StringProperty("")
    selected = BooleanProperty(False)
    photo = StringProperty("")
    thumb = StringProperty("")
    waiting = BooleanProperty(False)
    _ticket: Ticket | None = None

    def on_photo(self, _row: object, sha256: str) -> None:
        thumbnails().cancel(self._ticket)
        self._ticket, self.thumb, self.waiting = None, "", bool(sha256)
        if sha256:
            self._ask(sha256)

    def on_parent(self, _row: object, parent: object) -> None:
        """A row the list takes off the screen (it keeps it for later) drops its request; put back still
        waiting, it asks again."""
        if parent is None:
            thumbnails().cancel(self._ticket)
            self._ticket = None
        elif self.waiting and self._ticket is None and self.photo:
            self._ask(self.photo)

    def _ask(self, sha256: str) -> None:
        listing = App.get_running_app().listing
        self._ticket = thumbnails().ask((str(listing.photos), sha256), partial(listing.thumbnail, sha256),
                                        partial(self._show, sha256))

    def _show(self, sha256: str, path: str) -> None:
        if self.photo != sha256:
            return  # the row shows another find now
        self._ticket, self.waiting, self.thumb = None, False, path


class FindsScreen(BaulkScreen):
    units = ListProperty([ANY_UNIT])
    chosen = StringProperty("")
    detail = StringProperty("")
    count = StringProperty("")

    def refresh(self) -> None:
        self.units = [ANY_UNIT, *self.app.listing.units()]
        self.search()

    def filters(self) -> FindFilter:
        ids = self.ids
        day = self.app.days.day
        return FindFilter(text=ids.text.text, unit=None if ids.unit.text in ("", ANY_UNIT) else ids.unit.text,
                          category=None if ids.category.text in ("", ANY_KIND) else ids.category.text,
                          day=day.now().date() if ids.today.state == "down" and day else None,
                          unresolved_only=ids.unresolved.state == "down", site_id=day.site.id if day else None)

    def search(self) -> None:
        """The first page at once; more pages as the list is scrolled towards its end (``more``)."""
        self._filter = self.filters()
        self._total = self.app.listing.count(self._filter)
        self.ids.rv.data = self._page(0)
        self.count = f"{self._total} {'find' if self._total == 1 else 'finds'}"
        if self.chosen and self.chosen not in {r["find_id"] for r in self.ids.rv.data}:
            self.chosen, self.detail = "", ""  # a find the filter hides is not acted on

    def _page(self, offset: int) -> list[dict[str, str]]:
        rows = self.app.listing.rows(self._filter, limit=PAGE, offset=offset)
        return [{"text": r["text"], "find_id": r["id"], "selected": r["id"] == self.chosen, "photo": r["photo"]}
                for r in rows]

    def more(self, scroll_y: float) -> None:
        loaded = len(self.ids.rv.data)
        if scroll_y < 0.2 and loaded < getattr(self, "_total", 0):
            self.ids.rv.data.extend(self._page(loaded))

    def choose(self, find_id: str) -> None:
        from schema.records import Find, Unit

        find = self.app.store.get(Find, uuid.UUID(find_id))
        self.chosen = find_id
        for row in self.ids.rv.data:
            row["selected"] = row["find_id"] == find_id
        self.ids.rv.refresh_from_data()
        checks = self.app.finds.open_checks(find.id)
        unit = self.app.store.get(Unit, find.unit_id).code
        self.detail = (f"Find {find.number} in unit {unit}: {find.category} {find.material.replace('_', ' ')}, {find.recovery}"
                       + (" VOIDED: " + (find.void_reason or "") if find.voided else "")
                       + "".join(f"\n{c['severity'].upper()} {c['code']}: {c['message']}"
                                 + (f" (confirmed: {c['confirmed_reason']})" if c["confirmed_reason"] else f". Fix: {c['fix']}")
                                 for c in checks))

    def correct(self) -> None:
        if self.chosen:
            self.app.go("record").load_find(self.chosen)

    def void(self) -> None:
        if not self.chosen:
            return
        done = self.guard(self.app.finds.void, uuid.UUID(self.chosen), self.ids.void_reason.text)
        if done is not None:
            self.ids.void_reason.text = ""
            self.choose(self.chosen)
            self.search()
