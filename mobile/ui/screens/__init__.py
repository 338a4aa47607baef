"""One module per screen with its .kv beside it. ``BaulkScreen`` gives each the app, a message line, and
``guard``, which turns a domain error into the plain words shown on screen (the error already says the fix)."""

from __future__ import annotations

from typing import Any, Callable

from kivy.app import App
from kivy.properties import StringProperty
from kivy.uix.screenmanager import Screen

from schema.errors import BaulkError

__all__ = ["BaulkScreen"]


class BaulkScreen(Screen):
    message = StringProperty("")
    problem = StringProperty("")

    @property
    def app(self) -> Any:
        return App.get_running_app()

    def on_pre_enter(self, *_: Any) -> None:
        self.problem = ""
        self.guard(self.refresh)

    def refresh(self) -> None:
        """Re-read what the screen shows (called each time it is shown)."""

    def guard(self, action: Callable[..., Any], *args: Any, **kw: Any) -> Any:
        """Run ``action``; a domain error becomes the screen's problem line instead of a crash."""
        try:
            result = action(*args, **kw)
        except BaulkError as exc:
            self.problem = f"PROBLEM: {exc}"
            return None
        except ValueError as exc:  # a typed value the form could not read
            self.problem = f"PROBLEM: {exc}"
            return None
        self.problem = ""
        return result
