"""The few widgets every screen shares (sizes and colours in ``widgets.kv``) and ``FormGrid``, which builds a
form's inputs from the ``FormField`` list the record models give (no field is written twice)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from kivy.lang import Builder
from kivy.uix.button import Button
from kivy.uix.gridlayout import GridLayout
from kivy.uix.label import Label
from kivy.uix.spinner import Spinner
from kivy.uix.textinput import TextInput
from kivy.uix.togglebutton import ToggleButton

from schema.forms import FormField

__all__ = ["Alarm", "Big", "Caption", "Choice", "Entry", "FormGrid", "Pick", "Say", "Title", "load_kv", "shown_words"]

_LOADED: set[str] = set()


def load_kv(path: Path | str) -> None:
    """Load a .kv file once (screens call this for the .kv beside them when first shown)."""
    path = str(path)
    if path not in _LOADED:
        Builder.load_file(path)
        _LOADED.add(path)


class Big(Button):
    """A large, high-contrast button."""


class Choice(ToggleButton):
    """One of a group of large toggle buttons (category, position source)."""


class Say(Label):
    """Wrapped text at field size."""


class Caption(Label):
    """A one-line label as tall as a touch target, beside an input."""


class Title(Label):
    pass


class Alarm(Say):
    """Text that must be noticed (errors, cautions); always starts with a word, never colour alone."""


class Entry(TextInput):
    pass


class Pick(Spinner):
    pass


class FormGrid(GridLayout):
    """Label + input per ``FormField``: a spinner for a choice, a yes/no toggle for a flag, a text input for the
    rest (numbers get the number keyboard). ``values()`` gives back the strings the controllers type."""

    def set_fields(self, fields: list[FormField]) -> None:
        self.clear_widgets()
        self.inputs: dict[str, Any] = {}
        self.shown: dict[str, dict[str, str]] = {}  # a choice's words on screen -> its stored value
        for f in fields:
            self.add_widget(Caption(text=f.label + (" *" if f.required else ""), size_hint_x=0.4))
            if f.kind == "choice":
                self.shown[f.name] = {shown_words(c): c for c in f.choices}
                first = shown_words(f.choices[0]) if f.required and len(f.choices) == 1 else ""
                widget: Any = Pick(text=first, values=("", *self.shown[f.name]))
            elif f.kind == "flag":
                widget = Choice(text="no")
                widget.bind(state=lambda w, state: setattr(w, "text", "yes" if state == "down" else "no"))
            else:
                widget = Entry(input_filter="float" if f.kind == "number" else ("int" if f.kind == "integer" else None),
                               hint_text=f.help[:40])
            widget.size_hint_x = 0.6
            self.inputs[f.name] = widget
            self.add_widget(widget)

    def values(self) -> dict[str, str]:
        out = {}
        for name, widget in getattr(self, "inputs", {}).items():
            if isinstance(widget, ToggleButton):
                out[name] = "yes" if widget.state == "down" else ""
            elif name in self.shown:
                out[name] = self.shown[name].get(widget.text, widget.text)
            else:
                out[name] = widget.text
        return {k: v for k, v in out.items() if v != ""}

    def set_values(self, values: dict[str, Any]) -> None:
        for name, widget in getattr(self, "inputs", {}).items():
            value = values.get(name)
            if isinstance(widget, ToggleButton):
                widget.state = "down" if value else "normal"
            elif name in self.shown:
                widget.text = "" if value is None else shown_words(str(value))
            else:
                widget.text = "" if value is None else (f"{value:g}" if isinstance(value, float) else str(value))


def shown_words(value: str) -> str:
    """A vocabulary's key as words on screen (``horn_core`` -> ``horn core``); the key itself is what is stored.
    The words come from ``schema.vocab.words``, the one rule for every screen and page."""
    from schema.vocab import words

    return words(value)
