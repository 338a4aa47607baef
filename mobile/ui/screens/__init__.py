"""One module per screen with its .kv beside it. ``BaulkScreen`` gives each the app, a message line, and
``guard``, which turns a domain error into the plain words shown on screen (the error already says the fix)."""

from __future__ import annotations

from typing import Any, Callable

from kivy.app import App
from kivy.properties import StringProperty
from kivy.uix.screenmanager import Screen

from schema.errors import BaulkError
from schema.wording import error_words

__all__ = ["BaulkScreen"]


class BaulkScreen(Screen):
    message = StringProperty("")
    problem = StringProperty("")

    @property
    def app(self) -> Any:
        return App.get_running_app()

    def on_problem(self, _screen: Any, text: str) -> None:
        """A problem is never out of sight: the page scrolls to the line that shows it (after the frame that
        lays the new text out)."""
        if text:
            from kivy.clock import Clock

            Clock.schedule_once(lambda _dt: self.scroll_to_problem(), 0)

    def scroll_to_problem(self) -> None:
        from kivy.metrics import dp
        from kivy.uix.scrollview import ScrollView

        from ..widgets import Alarm

        for widget in self.walk(restrict=True):
            if isinstance(widget, Alarm) and widget.text == self.problem and self.problem:
                parent = widget.parent
                while parent is not None and parent is not self and not isinstance(parent, ScrollView):
                    parent = parent.parent
                content = parent.children[0] if isinstance(parent, ScrollView) and parent.children else None
                if content is not None and content.height > parent.height:  # a short page is all in sight
                    parent.scroll_to(widget, padding=dp(72), animate=False)
                return

    def on_pre_enter(self, *_: Any) -> None:
        self.problem = ""
        self.guard(self.refresh)

    def refresh(self) -> None:
        """Re-read what the screen shows (called each time it is shown)."""

    def guard(self, action: Callable[..., Any], *args: Any, **kw: Any) -> Any:
        """Run ``action``; a domain error becomes the screen's problem line instead of a crash."""
        try:
            result = action(*args, **kw)
        except BaulkError as exc:  # a refused record names each field by its label, codes as the pickers show them
            self.problem = f"PROBLEM: {error_words(exc)}"
            return None
        except ValueError as exc:  # a typed value the form could not read
            self.problem = f"PROBLEM: {exc}"
            return None
        self.problem = ""
        return result
