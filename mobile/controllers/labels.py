"""The day's print queue: finds whose bag label has not been printed, printed as one PDF sheet and marked."""

from __future__ import annotations

import datetime as dt
import zoneinfo
from pathlib import Path

from schema.records import Find, Site, Trench, Unit

from ..labels import LabelData, write_label_sheet
from ..store import TabletStore

__all__ = ["LabelQueue"]


class LabelQueue:
    def __init__(self, store: TabletStore):
        self.store = store

    def queue(self) -> list[Find]:
        """Finds not voided whose label has not been printed, by number."""
        return [f for f in self.store.list(Find, label_printed_at=None, order_by="number") if not f.voided]

    def _labels(self, finds: list[Find]) -> list[LabelData]:
        sites = {s.id: s for s in self.store.list(Site)}
        trenches = {t.id: t for t in self.store.list(Trench)}
        units = {u.id: u for u in self.store.list(Unit)}
        out = []
        for f in finds:
            site = sites[f.site_id]
            out.append(LabelData(
                find_id=f.id, number=f.number, site=site.code, trench=trenches[f.trench_id].code,
                unit=units[f.unit_id].code, category=f.category, material=f.material,
                found_on=f.found_at.astimezone(zoneinfo.ZoneInfo(site.timezone)).date(), recorder=f.recorder,
                human_remains=f.human_remains))
        return out

    def print_queue(self, folder: Path, *, finds: list[Find] | None = None) -> Path:
        """Write the queue (or ``finds``) to a dated PDF in ``folder`` and mark those finds printed, the marks in
        one transaction after the file is complete."""
        todo = self.queue() if finds is None else finds
        now = dt.datetime.now(dt.timezone.utc)
        path = write_label_sheet(Path(folder) / f"labels-{now:%Y%m%d-%H%M%S}.pdf", self._labels(todo))
        with self.store.atomic():
            for f in todo:
                self.store.put(self.store.get(Find, f.id).model_copy(update={"label_printed_at": now}))
        return path
