"""The caution dialog: the caution's text, the question, the steps to affirm one by one, and an answer box; the
answer (and the steps ticked, when the caution lists any) is passed back to the caller, which records it.
Nothing here decides what is safe. Cautions are drawn in the sun theme (black on white, at least 7:1)."""

from __future__ import annotations

from typing import Any, Callable

from kivy.metrics import dp
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.popup import Popup

from ..cautions import Caution
from . import theme
from .widgets import Alarm, Big, Choice, Entry, Say

__all__ = ["CautionDialog"]


def _sun(widget: Any) -> Any:
    """Draw a dialog widget in the caution theme, whatever the screen's theme is."""
    c = theme.CAUTION
    if isinstance(widget, Alarm):
        widget.color = c["alarm"]
    elif isinstance(widget, Say):
        widget.color = c["fg"]
    elif isinstance(widget, Entry):
        widget.background_color, widget.foreground_color = c["field"], c["fg"]
        widget.hint_text_color, widget.cursor_color = c["muted"], c["accent"]
    elif isinstance(widget, Choice):
        def paint(w: Any, *_a: Any) -> None:
            w.background_color = c["chosen"] if w.state == "down" else c["field"]
            w.color = c["button_fg"] if w.state == "down" else c["fg"]
        widget.bind(state=paint)
        paint(widget)
    elif isinstance(widget, Big):
        widget.background_color, widget.color = c["button"], c["button_fg"]
    return widget


class CautionDialog(Popup):
    def __init__(self, caution: Caution, on_answer: Callable[..., Any], on_cancel: Callable[[], Any] | None = None,
                 **kw: Any):
        c = theme.CAUTION
        super().__init__(title=caution.title, size_hint=(0.92, None), height=dp(560 + 64 * len(caution.affirm)),
                         auto_dismiss=False, title_size="24sp", title_color=c["alarm"] if caution.stops_work else c["fg"],
                         background="", background_color=c["bg"], separator_color=c["fg"], **kw)
        self.caution, self.on_answer, self.on_cancel = caution, on_answer, on_cancel
        box = BoxLayout(orientation="vertical", spacing=dp(10), padding=dp(10))
        box.add_widget(_sun(Alarm(text=("STOP. " if caution.stops_work else "CAUTION. ") + caution.text)))
        self.steps: dict[str, Choice] = {}
        for step in caution.affirm:
            self.steps[step] = _sun(Choice(text=f"Done: {step}"))
            box.add_widget(self.steps[step])
        box.add_widget(_sun(Say(text=caution.ask)))
        self.answer = _sun(Entry(hint_text=caution.ask))
        box.add_widget(self.answer)
        self.record_button = _sun(Big(text="Record the answer", on_release=lambda *_: self._done()))
        box.add_widget(self.record_button)
        if on_cancel is not None:
            self.back_button = _sun(Big(text="Back", on_release=lambda *_: self._cancel()))
            box.add_widget(self.back_button)
        self.content = box

    def affirmed(self) -> tuple[str, ...]:
        return tuple(step for step, toggle in self.steps.items() if toggle.state == "down")

    def _done(self) -> None:
        if not self.answer.text.strip():
            self.answer.hint_text = "an answer is needed: " + self.caution.ask
            return
        self.dismiss()
        if self.caution.affirm:
            self.on_answer(self.answer.text.strip(), self.affirmed())
        else:
            self.on_answer(self.answer.text.strip())

    def _cancel(self) -> None:
        self.dismiss()
        if self.on_cancel:
            self.on_cancel()
