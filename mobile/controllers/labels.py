"""The day's print queue: finds whose bag label has not been printed, printed as one PDF sheet and marked.

A sheet is made in three steps so that a screen can write the file off its own thread: ``prepare`` (reads the
store: which finds, their label text, the file name), ``write`` (the PDF alone, with progress per page; safe on
a worker thread), ``mark`` (the finds marked printed, in one transaction, after the file is complete).
``print_queue`` does the three in turn."""

from __future__ import annotations

import datetime as dt
import math
import zoneinfo
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from schema.errors import FieldProblem, RecordInvalid, RecordNotFound
from schema.records import Find, Site, Trench, Unit

from ..labels import COLS, ROWS, LabelData, write_label_sheet
from ..store import TabletStore

__all__ = ["LabelJob", "LabelQueue", "page_sentence", "sheet_sentence"]


@dataclass(frozen=True)
class LabelJob:
    """One sheet to write: the finds, their labels, the file, and when they count as printed."""

    finds: list[Find]
    labels: list[LabelData]
    path: Path
    at: dt.datetime

    @property
    def pages(self) -> int:
        return math.ceil(len(self.labels) / (COLS * ROWS))


def page_sentence(done: int, pages: int, count: int) -> str:
    """The progress line while a sheet is written, e.g. ``Writing 384 labels: page 3 of 19``."""
    return f"Writing {count} {'label' if count == 1 else 'labels'}: page {done} of {pages}"


def sheet_sentence(path: Path, count: int, *, again: bool = False) -> str:
    """What the Labels screen says after a sheet is written: how many labels on how many pages, and that the
    tablet only wrote a file."""
    pages = math.ceil(count / (COLS * ROWS))
    what = f"{count} {'label' if count == 1 else 'labels'} on {pages} {'page' if pages == 1 else 'pages'}"
    return (f"Label sheet written{' again' if again else ''}: {what}, in {path}. This tablet does not print: open "
            "the file on a computer with a printer and print it at actual size (A4, no scaling).")


class LabelQueue:
    def __init__(self, store: TabletStore):
        self.store = store

    def queue(self) -> list[Find]:
        """This tablet's finds (not voided) whose label has not been printed, by number; another tablet's finds
        that sync brought are labelled by that tablet."""
        me = self.store.device_id()
        return [f for f in self.store.list(Find, label_printed_at=None, order_by="number")
                if not f.voided and (me is None or f.device_id == me)]

    def in_range(self, first: int, last: int) -> list[Find]:
        """This tablet's finds numbered ``first`` to ``last`` (printed or not): a reprint of a torn or lost label."""
        if first > last:
            raise RecordInvalid("labels", [FieldProblem("last", f"the range {first}-{last} runs backwards",
                                                        "give the lower number first")])
        me = self.store.device_id()
        found = [f for f in self.store.list(Find, order_by="number")
                 if first <= f.number <= last and not f.voided and (me is None or f.device_id == me)]
        if not found:
            raise RecordNotFound(f"this tablet holds no finds numbered {first} to {last}; check the numbers")
        return found

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

    def prepare(self, folder: Path | str, *, finds: list[Find] | None = None) -> LabelJob:
        """The sheet for the queue (or ``finds``): its labels and a dated file name in ``folder``."""
        todo = self.queue() if finds is None else finds
        if not todo:
            raise RecordNotFound("no labels are waiting; to write one again, give its numbers under Write again")
        now = dt.datetime.now(dt.timezone.utc)
        return LabelJob(todo, self._labels(todo), Path(folder) / f"labels-{now:%Y%m%d-%H%M%S}.pdf", now)

    @staticmethod
    def write(job: LabelJob, progress: Callable[[int, int], None] | None = None) -> Path:
        """The PDF alone (no store access: safe on a worker thread); ``progress(pages done, pages)``."""
        return write_label_sheet(job.path, job.labels, progress)

    def mark(self, job: LabelJob) -> None:
        """The job's finds marked printed, in one transaction (after its file is complete)."""
        with self.store.atomic():
            for f in job.finds:
                self.store.put(self.store.get(Find, f.id).model_copy(update={"label_printed_at": job.at}))

    def print_queue(self, folder: Path, *, finds: list[Find] | None = None,
                    progress: Callable[[int, int], None] | None = None) -> Path:
        """Write the queue (or ``finds``) to a dated PDF in ``folder`` and mark those finds printed, the marks in
        one transaction after the file is complete."""
        job = self.prepare(folder, finds=finds)
        path = self.write(job, progress)
        self.mark(job)
        return path
