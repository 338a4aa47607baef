"""The caution dialog: the caution's text, the question, and an answer box; the answer is passed back to the
caller, which records it (nothing here decides what is safe)."""

from __future__ import annotations

from typing import Any, Callable

from kivy.metrics import dp
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.popup import Popup

from ..cautions import Caution
from .widgets import Alarm, Big, Entry, Say

__all__ = ["CautionDialog"]


class CautionDialog(Popup):
    def __init__(self, caution: Caution, on_answer: Callable[[str], Any], on_cancel: Callable[[], Any] | None = None,
                 **kw: Any):
        super().__init__(title=caution.title, size_hint=(0.92, None), height=dp(520), auto_dismiss=False,
                         title_size="24sp", **kw)
        self.caution, self.on_answer, self.on_cancel = caution, on_answer, on_cancel
        box = BoxLayout(orientation="vertical", spacing=dp(10), padding=dp(10))
        box.add_widget(Alarm(text=("STOP. " if caution.stops_work else "CAUTION. ") + caution.text))
        box.add_widget(Say(text=caution.ask))
        self.answer = Entry(hint_text=caution.ask)
        box.add_widget(self.answer)
        self.record_button = Big(text="Record the answer", on_release=lambda *_: self._done())
        box.add_widget(self.record_button)
        if on_cancel is not None:
            box.add_widget(Big(text="Back", on_release=lambda *_: self._cancel()))
        self.content = box

    def _done(self) -> None:
        if not self.answer.text.strip():
            self.answer.hint_text = "an answer is needed: " + self.caution.ask
            return
        self.dismiss()
        self.on_answer(self.answer.text.strip())

    def _cancel(self) -> None:
        self.dismiss()
        if self.on_cancel:
            self.on_cancel()
