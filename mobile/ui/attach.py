"""The dialog Day's "Attach download" opens: choose the instrument's file (a file chooser like the photo
dialog's, or a typed path), say how it is written, check it (what would be matched, moved, left), then attach.
The work is ``AttachController``'s; what went wrong is shown here in its words."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Callable

from kivy.metrics import dp
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.popup import Popup
from kivy.uix.scrollview import ScrollView

from schema.errors import BaulkError
from schema.survey.templates import Template
from schema.wording import error_words

from ..controllers.attach import AttachController, AttachReview
from .widgets import Alarm, Big, Choice, Entry, Pick, Say

__all__ = ["AttachDialog", "attach_controller"]

DOWNLOAD_FILES = ["*.csv", "*.CSV", "*.txt", "*.TXT", "*.dat", "*.DAT"]
CSV_KIND = "CSV with a header"
SETUP_UNIT = "as the setup"


def attach_controller(app: Any) -> AttachController:
    """The app's attach controller, made once over its finds controller (the move limit from the settings)."""
    if getattr(app, "_attach_controller", None) is None:
        from ..settings import TabletSettings

        app._attach_controller = AttachController(app.finds, max_move_m=TabletSettings().download_max_move_m)
    return app._attach_controller  # type: ignore[no-any-return]


def _start_folder() -> str:
    for candidate in (Path.home() / "Downloads", Path.home() / "Download", Path.home()):
        if candidate.is_dir():
            return str(candidate)
    return "/"


def _row(*widgets: Any) -> BoxLayout:
    row = BoxLayout(size_hint_y=None, height=dp(60), spacing=dp(8))
    for w in widgets:
        row.add_widget(w)
    return row


class AttachDialog(Popup):
    """Check and attach one download; ``on_done(saved)`` is called with the written finds after."""

    def __init__(self, attach: AttachController, template: Template, on_done: Callable[[list[Any]], Any],
                 *, folder: str | None = None, **kw: Any):
        super().__init__(title="Attach the instrument's download", size_hint=(0.96, 0.96), auto_dismiss=False,
                         title_size="22sp", **kw)
        self.attach, self.template, self.on_done = attach, template, on_done
        self.review: AttachReview | None = None
        box = BoxLayout(orientation="vertical", spacing=dp(6), padding=dp(6))
        from kivy.uix.filechooser import FileChooserListView

        self.chooser = FileChooserListView(path=folder or _start_folder(), filters=DOWNLOAD_FILES, size_hint_y=1)
        self.chooser.bind(selection=lambda _w, sel: self._chosen(sel))
        box.add_widget(self.chooser)
        self.path = Entry(hint_text="the download file (chosen above, or typed)")
        self.path.bind(text=lambda *_: self._changed())
        box.add_widget(self.path)
        self.kind = Pick(text=CSV_KIND, values=[CSV_KIND, f"lines: {template.name}"], size_hint_x=0.6)
        self.unit = Pick(text=SETUP_UNIT, values=[SETUP_UNIT, "deg", "gon", "dms", "mil"], size_hint_x=0.4)
        for w in (self.kind, self.unit):
            w.bind(text=lambda *_: self._changed())
        box.add_widget(_row(self.kind, self.unit))
        self.prefix = Entry(hint_text="text before the number, e.g. F-", size_hint_x=0.5)
        self.target = Entry(hint_text="pole height (m), if no column", size_hint_x=0.5)
        box.add_widget(_row(self.prefix, self.target))
        self.columns = Entry(hint_text="other column names, e.g. point=PtID, e=East")
        box.add_widget(self.columns)
        for w in (self.prefix, self.target, self.columns):
            w.bind(text=lambda *_: self._changed())
        self.check_button = Big(text="Check download", on_release=lambda *_: self.check())
        box.add_widget(self.check_button)
        self.summary = Say(text="Choose the file, then Check download: nothing is written before Attach.")
        scroll = ScrollView(size_hint_y=None, height=dp(300), do_scroll_x=False)
        scroll.add_widget(self.summary)
        box.add_widget(scroll)
        self.move = Choice(text="Move them (I checked the points listed above)")
        self.problem = Alarm(text="", size_hint_y=None, height=dp(64))
        box.add_widget(self.move)
        box.add_widget(self.problem)
        self.attach_button = Big(text="Attach", disabled=True, on_release=lambda *_: self.do_attach())
        self.cancel_button = Big(text="Cancel", on_release=lambda *_: self.dismiss())
        box.add_widget(_row(self.attach_button, self.cancel_button))
        self.content = box

    def _chosen(self, selection: list[str]) -> None:
        if selection:
            self.path.text = selection[0]

    def _changed(self) -> None:
        """A new file or option: the last check no longer holds."""
        self.review = None
        self.attach_button.disabled = True
        self.problem.text = ""

    def check(self) -> None:
        try:
            self.review = self.attach.review(
                self.path.text, lines_template=self.template if self.kind.text != CSV_KIND else None,
                columns=self.columns.text, angle_unit=None if self.unit.text == SETUP_UNIT else self.unit.text,
                target_height_m=self.target.text, prefix=self.prefix.text.strip())
        except BaulkError as exc:
            self.review, self.attach_button.disabled = None, True
            self.problem.text = f"PROBLEM: {error_words(exc)}"
            return
        self.problem.text = ""
        self.summary.text = "\n".join(self.review.lines)
        self.attach_button.disabled = not self.review.to_write

    def do_attach(self) -> None:
        if self.review is None:
            self.problem.text = "PROBLEM: check the download first"
            return
        try:
            saved = self.attach.attach(self.review, confirm_moves=self.move.state == "down")
        except BaulkError as exc:
            self.problem.text = f"PROBLEM: {error_words(exc)}"
            return
        self.dismiss()
        self.on_done(saved)
