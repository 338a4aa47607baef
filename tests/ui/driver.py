"""Driving the real tablet window: frames, touches, typing, spinners and screenshots."""

from __future__ import annotations

import gc
import time
from pathlib import Path
from typing import Any, Callable


class Driver:
    def __init__(self, app: Any, loop: Any):
        self.app, self.loop = app, loop
        self.window = loop.window

    def pump(self, frames: int = 3) -> None:
        for _ in range(frames):
            self.loop.idle()

    def until(self, condition: Callable[[], bool], *, timeout_s: float = 60.0, what: str = "the condition") -> None:
        deadline = time.monotonic() + timeout_s
        while not condition():
            if time.monotonic() > deadline:
                raise AssertionError(f"timed out after {timeout_s:.0f} s waiting for {what}")
            self.pump(1)
            time.sleep(0.02)

    def screen(self, name: str | None = None) -> Any:
        manager = self.app.root.ids.manager
        return manager.get_screen(name or manager.current)

    def _into_view(self, widget: Any) -> None:
        from kivy.uix.scrollview import ScrollView

        parent = widget.parent
        while parent is not None and parent is not self.window and not isinstance(parent, ScrollView):
            parent = parent.parent
        recycled = any(c.__name__ == "RecycleView" for c in type(parent).__mro__)  # its rows are on screen
        content = parent.children[0] if isinstance(parent, ScrollView) and parent.children else None
        if isinstance(parent, ScrollView) and not recycled and content is not None and content.height > parent.height:
            parent.scroll_to(widget, padding=40, animate=False)
            self.pump(3)

    def tap(self, widget: Any) -> None:
        """A real touch (down, then up) at the widget's centre, after scrolling it into view."""
        from kivy.tests.common import UnitTestTouch

        self._into_view(widget)
        x, y = widget.to_window(*widget.center)
        assert 0 <= x < self.window.width and 0 <= y < self.window.height, f"{widget} is off screen at {x:.0f},{y:.0f}"
        touch = UnitTestTouch(x, y)
        touch.touch_down()
        self.pump(1)
        touch.touch_up()
        self.pump(3)
        gc.collect()  # collect now what a long session would collect some time: a widget kept only weakly fails here

    def nav(self, name: str) -> Any:
        self.tap(self.app.root.ids[f"nav_{name}"])
        assert self.app.root.ids.manager.current == name
        return self.screen(name)

    def type(self, entry: Any, text: str) -> None:
        """Focus by touch, clear, then type the text."""
        self.tap(entry)
        self.pump(2)  # a TextInput needs a frame before it takes text
        entry.select_all()
        entry.delete_selection()
        entry.insert_text(text)
        self.pump(1)

    def choose(self, spinner: Any, value: str) -> None:
        """Open a spinner by touch and touch the option."""
        self.tap(spinner)
        self.pump(3)
        options = [w for w in spinner._dropdown.container.children if getattr(w, "text", None) == value]
        assert options, f"{value!r} is not among {[w.text for w in spinner._dropdown.container.children]}"
        self.tap(options[0])
        assert spinner.text == value
        # Kivy's DropDown leaves the window a moment later (a scheduled dismiss); until then it takes every touch
        self.until(lambda: spinner._dropdown.parent is None, timeout_s=10, what=f"the list of {value!r} to close")

    def screenshot(self, folder: Path, name: str) -> Path:
        self.pump(3)
        saved = self.window.screenshot(name=str(folder / f"{name}.png"))
        return Path(saved)
