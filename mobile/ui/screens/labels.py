"""Bag labels: this tablet's finds whose label is not printed yet; one tap writes the sheet (a PDF to print at
actual size) and marks them; a range of numbers can be written again (a torn or lost label). The PDF is written
on a worker thread with a bar and a page count ("page 3 of 19"), so the screen stays usable meanwhile; the
finds are marked printed only after the file is complete."""

from __future__ import annotations

import threading
from typing import Any

from kivy.clock import Clock
from kivy.properties import BooleanProperty, NumericProperty, StringProperty

from schema.errors import BaulkError
from schema.wording import error_words

from ...controllers.labels import LabelJob, page_sentence, sheet_sentence
from . import BaulkScreen

__all__ = ["LabelsScreen"]


class LabelsScreen(BaulkScreen):
    waiting = StringProperty("")
    printed = StringProperty("")
    busy = BooleanProperty(False)  # a sheet is being written
    progress = NumericProperty(0)  # share of the pages written, 0-100
    progress_text = StringProperty("")  # "Writing 384 labels: page 3 of 19"

    def refresh(self) -> None:
        if not self.ids.folder.text:
            self.ids.folder.text = str(self.app.labels_dir)
        queue = self.app.labels.queue()
        n = len(queue)
        self.waiting = (f"{n} {'label' if n == 1 else 'labels'} of this tablet's finds waiting: "
                        + ", ".join(str(f.number) for f in queue[:60]) + (" ..." if n > 60 else "")) if queue \
            else "No labels waiting."

    def print_labels(self) -> None:
        if self.busy:
            return
        if not self.app.labels.queue():
            self.problem = "PROBLEM: no labels are waiting; to write one again, give its numbers under Write again"
            return
        job = self.guard(self.app.labels.prepare, self.ids.folder.text)
        if job is not None:
            self._start(job, again=False)

    def reprint(self) -> None:
        if self.busy:
            return
        ids = self.ids
        try:
            first, last = int(ids.first.text), int(ids.last.text or ids.first.text)
        except ValueError:
            self.problem = "PROBLEM: numbers: type the first and last find number to write again, e.g. 12 and 15"
            return
        finds = self.guard(self.app.labels.in_range, first, last)
        if finds is None:
            return
        job = self.guard(self.app.labels.prepare, ids.folder.text, finds=finds)
        if job is not None:
            self._start(job, again=True)

    def _start(self, job: LabelJob, *, again: bool) -> None:
        """The PDF on a worker thread; each page reported back on the UI thread through the clock."""
        count = len(job.labels)
        self.busy, self.progress, self.printed, self.problem = True, 0, "", ""
        self.progress_text = page_sentence(0, job.pages, count)

        def page(done: int, pages: int) -> None:
            Clock.schedule_once(lambda _dt: self._page(done, pages, count))

        def work() -> None:
            try:
                path = self.app.labels.write(job, page)
            except (BaulkError, OSError, ValueError) as exc:
                Clock.schedule_once(lambda _dt, e=exc: self._failed(e))
                return
            Clock.schedule_once(lambda _dt: self._written(job, path, again))

        threading.Thread(target=work, name="baulk-labels", daemon=True).start()

    def _page(self, done: int, pages: int, count: int) -> None:
        if self.busy:
            self.progress = 100 * done / pages
            self.progress_text = page_sentence(done, pages, count)

    def _written(self, job: LabelJob, path: Any, again: bool) -> None:
        self.busy = False
        if self.guard(self.app.labels.mark, job) is None and self.problem:
            self.progress_text = "The file was written but its finds were not marked printed."
            return
        self.progress = 100
        self.printed = sheet_sentence(path, len(job.labels), again=again)
        self.refresh()

    def _failed(self, exc: Exception) -> None:
        self.busy = False
        self.progress_text = "No label sheet was written; no find was marked printed."
        self.problem = f"PROBLEM: {error_words(exc)}" if isinstance(exc, BaulkError) else \
            f"PROBLEM: the label sheet could not be written ({exc}); check the folder and the free space"
