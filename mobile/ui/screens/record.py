"""Record a find: category first, then the fields it needs (built from the model), the position (shot, GNSS,
tape or sieve), save; the live checks show what is wrong and how to fix it, and the recorder corrects the
fields and saves the correction, or confirms the find as recorded with a reason."""

from __future__ import annotations

import uuid
from kivy.properties import BooleanProperty, ListProperty, StringProperty

from schema.forms import find_form

from ...cautions import Caution, human_remains_caution
from ...controllers import Position, Saved
from ...instruments import typed_shot_line
from ..caution import CautionDialog
from . import BaulkScreen

__all__ = ["RecordScreen"]


class RecordScreen(BaulkScreen):
    category = StringProperty("artifact")
    mode = StringProperty("shot")
    number = StringProperty("-")
    units = ListProperty([])
    datums = ListProperty([])
    spits = ListProperty([])
    checks = StringProperty("")
    editing = StringProperty("")  # the id of the find the form now corrects ("" for a new find)
    human_remains = BooleanProperty(False)
    gnss = StringProperty("")
    where = StringProperty("")

    def on_kv_post(self, *_: object) -> None:
        # only the panel of the chosen position source is in the tree (a hidden one would still catch touches)
        # ``ids`` holds weak proxies: keep the panels themselves, or a panel out of the tree is collected
        self._panels = {m: self.ids[f"panel_{m}"].__self__ for m in ("shot", "gnss", "tape", "sieve")}
        self.set_mode(self.mode)

    def refresh(self) -> None:
        days = self.app.days
        day = days.day
        if day is None:
            self.where = "Start the day first (Day)."
            return
        self.units = [u.code for u in days.units()]
        self.where = f"{day.site.code}  {day.trench.code}  {day.recorder}"
        self.ids.unit.text = day.unit.code if day.unit is not None else "choose the unit"
        self.datums = [p.code for p in days.control_points()]
        self._spits()
        self.guard(self._number)
        self.gnss = days.gnss.status()
        if not getattr(self.ids.form, "inputs", None):
            self.set_category(self.category)

    def _number(self) -> None:
        self.number = str(self.app.finds.next_number())

    def _spits(self) -> None:
        from schema.records import Spit

        day = self.app.days.day
        self.spits = [str(s.number) for s in self.app.store.list(Spit, unit_id=day.unit.id, order_by="number")] \
            if day and day.unit else []

    def choose_unit(self, code: str) -> None:
        if code in self.units and self.app.days.day is not None and (self.app.days.day.unit is None or self.app.days.day.unit.code != code):
            self.guard(self.app.days.choose_unit, code)
            self._spits()

    def set_category(self, category: str) -> None:
        self.category = category
        self.ids.form.set_fields(find_form(category))

    def set_mode(self, mode: str) -> None:
        self.mode = mode
        box = self.ids.position_box
        box.clear_widgets()
        box.add_widget(self._panels[mode])

    def read_instrument(self) -> None:
        line = self.guard(self.app.read_shot_line)
        if line:
            self.ids.shot_line.text = line
        elif self.problem == "":
            self.problem = "PROBLEM: no shot line from the instrument yet; shoot again or type the line"

    def use_typed_readings(self) -> None:
        """Readings typed off the instrument's screen, in the accepted setup's angle unit."""
        ids, day = self.ids, self.app.days.day
        unit = day.setup.angle_unit if day is not None and day.setup is not None else "deg"
        line = self.guard(typed_shot_line, ids.typed_hz.text, ids.typed_zen.text, ids.typed_sd.text, ids.typed_th.text,
                          angle_unit=unit)
        if line:
            ids.shot_line.text = line

    def read_receiver(self) -> None:
        status = self.guard(self.app.read_receiver)
        if status:
            self.gnss = status

    def toggle_human_remains(self, down: bool) -> None:
        if not down:
            self.human_remains, self._notified = False, ""
            return
        c: Caution = human_remains_caution()

        def answered(text: str) -> None:
            self.human_remains, self._notified = True, text

        def cancelled() -> None:
            self.ids.human_remains.state = "normal"

        self.dialog = CautionDialog(c, answered, cancelled)
        self.dialog.open()

    def _position(self) -> Position:
        ids = self.ids
        if self.mode == "shot":
            return Position("shot", shot_line=ids.shot_line.text)
        if self.mode == "gnss":
            return Position("gnss", override_reason=ids.override.text.strip() or None)
        if self.mode == "tape":
            def num(text: str) -> float | None:
                try:
                    return float(text.replace(",", "."))
                except ValueError:
                    return None

            return Position("tape", tape_from=ids.tape_from.text or None, tape_east_m=num(ids.tape_e.text),
                            tape_north_m=num(ids.tape_n.text), tape_depth_m=num(ids.tape_d.text))
        return Position("sieve", spit=int(ids.spit.text) if ids.spit.text.isdigit() else None,
                        bucket=ids.bucket.text.strip() or None)

    def save(self) -> None:
        """Save a new find, or the correction of the one just saved."""
        values = self.ids.form.values()
        if self.editing:  # the find's own fields; a sample's details are corrected at the camp
            from schema.records import Find

            saved = self.guard(self.app.finds.edit, uuid.UUID(self.editing),
                               {k: v for k, v in values.items() if k in Find.model_fields})
        else:
            saved = self.guard(self.app.finds.record, category=self.category, values=values, position=self._position(),
                               possible_human_remains=self.human_remains,
                               human_remains_notified=getattr(self, "_notified", "") or None)
        if saved is not None:
            self._show(saved)

    def _show(self, saved: Saved) -> None:
        f = saved.find
        self.editing = str(f.id)
        lines = [f"Saved find {f.number} in unit {self.ids.unit.text}"
                 + (f" at E {f.e:.3f} N {f.n:.3f} Z {f.z:.3f}" if f.e is not None else " (no point: sieve find)") + "."]
        for i in saved.issues:
            if i.severity == "info":
                continue
            lines.append(f"{i.severity.upper()} {i.code}: {i.message}. Fix: {i.fix}")
        if saved.clean:
            lines.append("All checks passed. Tap New find for the next one.")
        else:
            lines.append("Correct the fields above and tap Save correction, or confirm it as recorded with a reason.")
        self.checks = "\n".join(lines)
        self._open = [i.code for i in saved.issues if i.severity != "info"]
        for caution in saved.cautions:
            self.dialog = CautionDialog(caution, lambda text, c=caution: self.guard(self.app.days.answer_caution, c, text))
            self.dialog.open()
        self.guard(self._number)

    def confirm(self) -> None:
        if not self.editing or not getattr(self, "_open", []):
            self.problem = "PROBLEM: there is no open check to confirm"
            return
        reason = self.ids.reason.text
        for code in list(self._open):
            if self.guard(self.app.finds.confirm, uuid.UUID(self.editing), code, reason) is None:
                return
        self.checks += f"\nConfirmed as recorded: {reason.strip()}"
        self._open = []
        self.ids.reason.text = ""

    def new_find(self) -> None:
        self.editing = ""
        self.checks = ""
        self.ids.form.set_values({})
        self.ids.shot_line.text = ""
        self.ids.human_remains.state = "normal"
        self.human_remains = False
        self.guard(self._number)

    def load_find(self, find_id: str) -> None:
        """Open a saved find in the form to correct it (from the Finds screen)."""
        from schema.records import Find

        find = self.app.store.get(Find, uuid.UUID(find_id))
        self.set_category(find.category)
        self.ids.form.set_values(find.model_dump())
        self.editing = find_id
        self._open = [c["code"] for c in self.app.finds.open_checks(find.id) if c["confirmed_reason"] is None]
        self.checks = f"Correcting find {find.number}." + "".join(
            f"\n{c['severity'].upper()} {c['code']}: {c['message']}. Fix: {c['fix']}" for c in self.app.finds.open_checks(find.id))
