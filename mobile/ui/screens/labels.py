"""The print queue: finds whose bag label is not printed yet; one tap writes the sheet (PDF) and marks them."""

from __future__ import annotations

from kivy.properties import StringProperty

from . import BaulkScreen

__all__ = ["LabelsScreen"]


class LabelsScreen(BaulkScreen):
    waiting = StringProperty("")
    printed = StringProperty("")

    def refresh(self) -> None:
        if not self.ids.folder.text:
            self.ids.folder.text = str(self.app.labels_dir)
        queue = self.app.labels.queue()
        self.waiting = (f"{len(queue)} labels waiting: " + ", ".join(str(f.number) for f in queue[:60])
                        + (" ..." if len(queue) > 60 else "")) if queue else "No labels waiting."

    def print_labels(self) -> None:
        if not self.app.labels.queue():
            self.problem = "PROBLEM: no labels are waiting"
            return
        path = self.guard(self.app.labels.print_queue, self.ids.folder.text)
        if path is not None:
            self.printed = f"Labels written to {path}. Print it at actual size (A4, no scaling)."
            self.refresh()
