"""Units of today's trench: choose one to edit or start a new one (fields from the model: kind, description,
Munsell colour, condition, texture, status), relate it to another unit (matrix problems shown at once), and
shoot levels on its top or bottom surface."""

from __future__ import annotations

from typing import Any

from kivy.properties import ListProperty, StringProperty

from schema import vocab
from schema.munsell import parse_munsell

from ..caution import CautionDialog
from ..widgets import shown_words
from . import BaulkScreen

__all__ = ["UnitsScreen"]


class UnitsScreen(BaulkScreen):
    units = ListProperty([])
    kinds = ListProperty([shown_words(k) for k in vocab.values(vocab.RelationKind)])
    relations = StringProperty("")
    editing = StringProperty("")
    munsell_note = StringProperty("")

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
            self.show_relations()

    def new_unit(self) -> None:
        self.editing = ""
        self.ids.form.set_values({})
        self.relations = ""

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
        self.relations = "\n".join(f"{self.editing} {shown_words(kind)} {other}" if role == "upper"
                                   else f"{other} {shown_words(kind)} {self.editing}"
                                   for role, kind, other in rows) or "No relations yet."

    def relate(self) -> None:
        ids = self.ids
        kind = {shown_words(k): k for k in vocab.values(vocab.RelationKind)}.get(ids.kind.text, ids.kind.text)
        done = self.guard(self.app.units.relate, upper=ids.upper.text, lower=ids.lower.text, kind=kind)
        if done is None:
            return
        lines = [f"Relation saved: {ids.upper.text} {ids.kind.text} {ids.lower.text}."]
        lines += [f"{i.severity.upper()} {i.code}: {i.message}. Fix: {i.fix}" for i in done.issues]
        lines.append(done.rechecked.sentence(f"units {ids.upper.text} and {ids.lower.text}"))
        self.message = "\n".join(lines)
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
