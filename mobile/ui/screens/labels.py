"""Bag labels: this tablet's finds whose label is not printed yet; one tap writes the sheet (a PDF to print at
actual size) and marks them; a range of numbers can be written again (a torn or lost label)."""

from __future__ import annotations

from kivy.properties import StringProperty

from ...controllers.labels import sheet_sentence
from . import BaulkScreen

__all__ = ["LabelsScreen"]


class LabelsScreen(BaulkScreen):
    waiting = StringProperty("")
    printed = StringProperty("")

    def refresh(self) -> None:
        if not self.ids.folder.text:
            self.ids.folder.text = str(self.app.labels_dir)
        queue = self.app.labels.queue()
        n = len(queue)
        self.waiting = (f"{n} {'label' if n == 1 else 'labels'} of this tablet's finds waiting: "
                        + ", ".join(str(f.number) for f in queue[:60]) + (" ..." if n > 60 else "")) if queue \
            else "No labels waiting."

    def print_labels(self) -> None:
        queue = self.app.labels.queue()
        if not queue:
            self.problem = "PROBLEM: no labels are waiting; to write one again, give its numbers under Write again"
            return
        path = self.guard(self.app.labels.print_queue, self.ids.folder.text)
        if path is not None:
            self.printed = sheet_sentence(path, len(queue))
            self.refresh()

    def reprint(self) -> None:
        ids = self.ids
        try:
            first, last = int(ids.first.text), int(ids.last.text or ids.first.text)
        except ValueError:
            self.problem = "PROBLEM: numbers: type the first and last find number to write again, e.g. 12 and 15"
            return
        finds = self.guard(self.app.labels.in_range, first, last)
        if finds is None:
            return
        path = self.guard(self.app.labels.print_queue, ids.folder.text, finds=finds)
        if path is not None:
            self.printed = sheet_sentence(path, len(finds), again=True)
            self.refresh()
