"""Units of today's trench: choose one to edit or start a new one (fields from the model: kind, description,
Munsell colour, condition, texture, status), relate it to another unit (matrix problems shown at once), void a
wrong relation with a reason (a row per relation, each with its Void button; a voided one struck through with
Restore), and shoot levels on its top or
bottom surface."""

from __future__ import annotations

from typing import Any

from kivy.factory import Factory
from kivy.properties import DictProperty, ListProperty, StringProperty
from kivy.utils import escape_markup

from schema import vocab
from schema.munsell import parse_munsell
from schema.wording import in_words

from ..caution import CautionDialog
from ..widgets import Big, Caption, Say, shown_words
from . import BaulkScreen

__all__ = ["UnitsScreen"]


class UnitsScreen(BaulkScreen):
    units = ListProperty([])
    kinds = ListProperty([shown_words(k) for k in vocab.values(vocab.RelationKind)])
    relations = StringProperty("")
    editing = StringProperty("")
    munsell_note = StringProperty("")
    relation_note = StringProperty("")  # what the last void did, shown under the relations
    void_buttons = DictProperty({})  # relation id -> its Void button (the rows are rebuilt on every change)
    restore_buttons = DictProperty({})  # relation id -> the Restore button of a voided relation

    def refresh(self) -> None:
        if self.app.days.day is None:
            self.message = "Start the day first (Day)."
            return
        self.units = [u.code for u in self.app.units.units()]
        if not getattr(self.ids.form, "inputs", None):
            self.ids.form.set_fields(self.app.units.form())
            self.ids.form.inputs["munsell"].bind(text=lambda _w, text: self.check_munsell(text))
        self.message = f"Units in trench {self.app.days.day.trench.code}: {len(self.units)}"

    def check_munsell(self, text: str) -> None:
        """Live help on the Munsell notation (hue value/chroma, e.g. 10YR 5/3)."""
        if not text.strip():
            self.munsell_note = ""
            return
        try:
            parse_munsell(text)
            self.munsell_note = f"Munsell {text.strip()}: reads as a valid notation."
        except ValueError as exc:
            self.munsell_note = f"MUNSELL: {exc}"

    def pick(self, code: str) -> None:
        if code not in self.units:  # the placeholder, or nothing chosen yet
            return
        unit = self.guard(self.app.units.unit, code)
        if unit is not None:
            self.editing = code
            self.ids.form.set_values(unit.model_dump())
            self.relation_note = ""
            self.show_relations()

    def new_unit(self) -> None:
        self.editing = ""
        self.ids.form.set_values({})
        self.relations = self.relation_note = ""
        self._relation_rows([])

    def save(self) -> None:
        unit = self.guard(self.app.units.save_unit, self.ids.form.values(), code=self.editing or None)
        if unit is not None:
            self.editing = unit.code
            self.message = f"Unit {unit.code} saved ({shown_words(unit.kind)}, {unit.status})."
            self.units = [u.code for u in self.app.units.units()]
            self.show_relations()

    def show_relations(self) -> None:
        if not self.editing:
            return
        rows = self.guard(self.app.units.relations, self.editing) or []
        self.relations = "" if rows else f"No relations of unit {self.editing} yet."
        self._relation_rows(rows)

    def _relation_rows(self, rows: list[Any]) -> None:
        """One row per relation: its words, and a Void button while it is in force."""
        box = self.ids.relation_rows
        box.clear_widgets()
        buttons, restores = {}, {}
        for line in rows:
            row = Factory.Row()
            if line.voided:  # struck through, with why, and its Restore
                row.add_widget(Say(markup=True, pos_hint={"center_y": 0.5},
                                   text=f"[s]{escape_markup(line.plain())}[/s] VOIDED: {escape_markup(line.void_reason or '')}"))
                button = Big(text="Restore", size_hint_x=0.3)
                button.bind(on_release=lambda _b, rid=line.relation_id, words=line.plain(): self.restore_relation(rid, words))
                restores[str(line.relation_id)] = button
            else:
                row.add_widget(Caption(text=line.words()))
                button = Big(text="Void", size_hint_x=0.3)
                button.bind(on_release=lambda _b, rid=line.relation_id, words=line.words(): self.void_relation(rid, words))
                buttons[str(line.relation_id)] = button
            row.add_widget(button)
            box.add_widget(row)
        self.void_buttons, self.restore_buttons = buttons, restores

    def void_relation(self, relation_id: Any, words: str) -> None:
        """Void one relation with the reason typed under the list."""
        self._change_relation(self.app.units.void_relation, relation_id,
                              lambda done: f"Relation {words} voided ({done.line.void_reason}); it no longer counts "
                                           "in the matrix.")

    def restore_relation(self, relation_id: Any, words: str) -> None:
        """Put one voided relation back in force with the reason typed under the list."""
        self._change_relation(self.app.units.restore_relation, relation_id,
                              lambda _done: f"Relation {words} restored; it counts in the matrix again.")

    def _change_relation(self, change: Any, relation_id: Any, said: Any) -> None:
        """Void or restore (``change``) with the typed reason; what was done, the matrix checks and the re-run
        checks are shown under the relations, where the tap was."""
        done = self.guard(change, relation_id, self.ids.relation_void_reason.text)
        if done is None:
            return
        self.ids.relation_void_reason.text = ""
        lines = [said(done)]
        lines += [in_words(f"{i.severity.upper()} {i.code}: {i.message}. Fix: {i.fix}") for i in done.issues]
        lines.append(done.rechecked.sentence(f"units {done.line.upper} and {done.line.lower}"))
        self.message, self.relation_note = "", "\n".join(lines)
        self.show_relations()

    def relate(self) -> None:
        ids = self.ids
        kind = {shown_words(k): k for k in vocab.values(vocab.RelationKind)}.get(ids.kind.text, ids.kind.text)
        done = self.guard(self.app.units.relate, upper=ids.upper.text, lower=ids.lower.text, kind=kind)
        if done is None:
            return
        lines = [f"Relation saved: {ids.upper.text} {ids.kind.text} {ids.lower.text}."]
        lines += [in_words(f"{i.severity.upper()} {i.code}: {i.message}. Fix: {i.fix}") for i in done.issues]
        lines.append(done.rechecked.sentence(f"units {ids.upper.text} and {ids.lower.text}"))
        self.message, self.relation_note = "", "\n".join(lines)  # shown under the relations, where the tap was
        self.show_relations()

    def take_photo(self) -> None:
        """The photo dialog for the unit being edited (or the day's unit)."""
        from ..photo import PhotoDialog, photo_controller

        photos = photo_controller(self.app)
        target = self.guard(photos.of_unit, self.editing or None)
        if target is not None:
            self.dialog = PhotoDialog(photos, target, lambda photo: self._photo_kept(photo, target.label))
            self.dialog.open()

    def _photo_kept(self, photo: Any, label: str) -> None:
        self.message = f"Photo P{photo.number} of {label} kept ({photo.width_px} x {photo.height_px} pixels)."

    def read_level(self) -> None:
        line = self.guard(self.app.read_shot_line)
        if line:
            self.ids.level_line.text = line

    def add_level(self) -> None:
        ids = self.ids
        got = self.guard(self.app.units.level_point, unit=self.editing or (self.app.days.day.unit.code if self.app.days.day.unit else ""),
                         surface=ids.surface.text, shot_line=ids.level_line.text)
        if got is None:
            return
        point, cautions = got
        unit = self.editing or self.app.days.day.unit.code
        self.message = (f"Level saved on the {point.surface} of unit {unit} at Z {point.z:.3f}. "
                        + self.app.units.last_recheck.sentence(f"unit {unit}"))
        ids.level_line.text = ""
        for caution in cautions:
            self.dialog = CautionDialog(caution, lambda text, *_a, c=caution: self.guard(self.app.days.answer_caution, c, text))
            self.dialog.open()
