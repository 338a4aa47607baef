"""Record a find: category first, then the fields it needs (built from the model), the position (shot, GNSS,
tape or sieve), save; the live checks show what is wrong and how to fix it, and the recorder corrects the
fields and saves the correction, or confirms the find as recorded with a reason."""

from __future__ import annotations

import uuid

from kivy.properties import BooleanProperty, ListProperty, StringProperty
from kivy.uix.widget import Widget

from schema.forms import find_form
from schema.wording import in_words

from ...cautions import Caution, human_remains_caution
from ...controllers import Position, Saved
from ...instruments import typed_shot_line
from ..caution import CautionDialog
from . import BaulkScreen

__all__ = ["RecordScreen"]


class RecordScreen(BaulkScreen):
    category = StringProperty("artifact")
    mode = StringProperty("shot")
    number = StringProperty("-")  # the next new find's number
    units = ListProperty([])
    datums = ListProperty([])
    spits = ListProperty([])
    checks = StringProperty("")
    editing = StringProperty("")  # the id of the find the form now corrects ("" for a new find)
    editing_number = StringProperty("")
    checked = StringProperty("")  # the id of the find whose checks are shown (Confirm acts on it)
    checked_number = StringProperty("")
    has_open = BooleanProperty(False)  # the checked find has checks open (Confirm is for those)
    human_remains = BooleanProperty(False)
    gnss = StringProperty("")
    where = StringProperty("")
    now_at = StringProperty("")  # where the find being corrected is now
    summary = StringProperty("")  # one line above the buttons: what the last save wrote, or the problem
    summary_alarm = BooleanProperty(False)  # the line is a problem or open checks: drawn as an alarm
    photo_thumb = StringProperty("")  # the thumbnail of the shown find's newest photo ("" for none)
    photo_line = StringProperty("")  # that photo's register line, and how many the find has
    photo_waiting = BooleanProperty(False)  # its thumbnail is being made (a grey placeholder is shown)
    photo_id = StringProperty("")  # that photo's id (Void photo acts on it)
    photo_number = StringProperty("")  # its register number as shown ("P3")
    _thumb_ticket = None  # the thumbnail worker's ticket for it (mobile.ui.thumbs)
    _thumb_for: tuple[str, str] | None = None  # (find id, photo hash) the thumbnail was asked for

    def on_summary(self, _screen: object, text: str) -> None:
        self.summary_alarm = text.startswith(("CHECKS", "PROBLEM"))

    def on_kv_post(self, *_: object) -> None:
        # only the panel of the chosen position source is in the tree (a hidden one would still catch touches)
        # ``ids`` holds weak proxies: keep the panels themselves, or a panel out of the tree is collected
        self._panels = {m: self.ids[f"panel_{m}"].__self__ for m in ("shot", "gnss", "tape", "sieve")}
        self._open: list[str] = []
        self._ticker = None
        self.set_mode(self.mode)

    def on_enter(self, *_: object) -> None:
        from kivy.clock import Clock

        self._ticker = Clock.schedule_interval(lambda _dt: self._gnss_line(), 1.0)

    def on_leave(self, *_: object) -> None:
        if self._ticker is not None:
            self._ticker.cancel()
            self._ticker = None

    def on_problem(self, screen: object, text: str) -> None:
        """Record keeps its buttons at the bottom: the problem shows right above them too."""
        super().on_problem(screen, text)
        if text:
            self.summary = text

    def _gnss_line(self) -> None:
        if self.app.days.day is not None:
            self.gnss = self.app.days.gnss_line()

    def refresh(self) -> None:
        days = self.app.days
        day = days.day
        if day is None:
            self.where = "Start the day first (Day)."
            return
        self.units = [u.code for u in days.units()]
        self.where = f"{day.site.code}  {day.trench.code}  {day.recorder}"
        if not self.editing:
            self.ids.unit.text = day.unit.code if day.unit is not None else "choose the unit"
        self.datums = [p.code for p in days.control_points()]
        self._spits()
        self.guard(self._number)
        self._gnss_line()
        if not getattr(self.ids.form, "inputs", None):
            self.set_category(self.category)

    def _number(self) -> None:
        self.number = str(self.app.finds.next_number())

    def _spits(self) -> None:
        from schema.records import Spit, Unit

        day = self.app.days.day
        code = self.ids.unit.text
        unit = next((u for u in self.app.store.list(Unit, trench_id=day.trench.id) if u.code == code), None) if day else None
        self.spits = [str(s.number) for s in self.app.store.list(Spit, unit_id=unit.id, order_by="number")] if unit else []

    def choose_unit(self, code: str) -> None:
        """A new find: the unit being dug (kept for the day). A correction: the unit the find moves to."""
        if code not in self.units or self.app.days.day is None:
            return
        if not self.editing and (self.app.days.day.unit is None or self.app.days.day.unit.code != code):
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
        box.add_widget(Widget())  # the panel at the top of the box (a box lays its children out from the bottom)

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
            self._gnss_line()

    def toggle_human_remains(self, down: bool) -> None:
        if not down:
            self.human_remains, self._notified, self._affirmed = False, "", ()
            return
        c: Caution = human_remains_caution()

        def answered(text: str, affirmed: tuple[str, ...] = ()) -> None:
            self.human_remains, self._notified, self._affirmed = True, text, affirmed

        def cancelled() -> None:
            self.ids.human_remains.state = "normal"

        self.dialog = CautionDialog(c, answered, cancelled)
        self.dialog.open()

    def _position(self) -> Position:
        ids = self.ids
        if self.mode == "shot":
            return Position("shot", shot_line=ids.shot_line.text)
        if self.mode == "gnss":
            return Position("gnss", override_reason=ids.override.text.strip() or None,
                            old_fix_reason=ids.old_fix.text.strip() or None)
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
        """Save a new find, or the correction of the find named on the button (with its new position and unit
        when they were changed); then the form is ready for the next new find."""
        values = self.ids.form.values()
        if self.editing:  # the find's own fields; a sample's details are corrected at the camp
            from schema.records import Find

            position = self._position()
            saved = self.guard(self.app.finds.edit, uuid.UUID(self.editing),
                               {k: v for k, v in values.items() if k in Find.model_fields},
                               position=position if position.given() else None, unit_code=self.ids.unit.text)
        else:
            saved = self.guard(self.app.finds.record, category=self.category, values=values, position=self._position(),
                               possible_human_remains=self.human_remains,
                               human_remains_notified=getattr(self, "_notified", "") or None,
                               human_remains_affirmed=getattr(self, "_affirmed", ()))
        if saved is not None:
            was_correction = bool(self.editing)
            self._show(saved, correction=was_correction)
            self._ready_for_next()

    def on_checked(self, *_: object) -> None:
        self.has_open = bool(self.checked and self._open)

    def _unit_code(self, unit_id: object) -> str:
        from schema.records import Unit

        return self.app.store.get(Unit, unit_id).code

    def _show(self, saved: Saved, *, correction: bool) -> None:
        f = saved.find
        if correction:
            head = (f"Corrected find {f.number}: " + "; ".join(saved.written) + "." if saved.written
                    else f"Find {f.number}: nothing was changed.")
        else:
            head = (f"Saved find {f.number} in unit {self._unit_code(f.unit_id)}"
                    + (f" at E {f.e:.3f} N {f.n:.3f} Z {f.z:.3f}" if f.e is not None else " (no point: sieve find)") + ".")
        lines = [head]
        for i in saved.issues:
            if i.severity == "info":
                continue
            lines.append(in_words(f"{i.severity.upper()} {i.code}: {i.message}. Fix: {i.fix}"))
        self._open = [i.code for i in saved.issues if i.severity != "info"]
        self.checked, self.checked_number = str(f.id), str(f.number)
        self.has_open = bool(self._open)
        if saved.clean:
            lines.append(f"All checks passed. The form is ready for find {self.app.finds.next_number()}.")
        else:
            lines.append(f"Tap Correct find {f.number} to fix it, or confirm it as recorded with a reason.")
        self.checks = "\n".join(lines)
        self._show_photo()
        n_open = len(self._open)
        self.summary = head if not n_open else (
            f"CHECKS: {n_open} {'check is' if n_open == 1 else 'checks are'} open on find {f.number} "
            f"(listed above Confirm). {head}")
        for caution in saved.cautions:
            self.dialog = CautionDialog(caution, lambda text, *_a, c=caution: self.guard(self.app.days.answer_caution, c, text))
            self.dialog.open()

    def _ready_for_next(self) -> None:
        """The form cleared for the next new find (the category and position method stay)."""
        self.editing, self.editing_number, self.now_at = "", "", ""
        self.ids.form.set_values({})
        for name in ("shot_line", "typed_hz", "typed_zen", "typed_sd", "typed_th", "override", "old_fix",
                     "tape_e", "tape_n", "tape_d", "bucket"):
            self.ids[name].text = ""
        self.ids.human_remains.state = "normal"
        self.human_remains, self._notified, self._affirmed = False, "", ()
        day = self.app.days.day
        self.ids.unit.text = day.unit.code if day is not None and day.unit is not None else "choose the unit"
        self.guard(self._number)

    def confirm(self) -> None:
        if not self.checked or not self._open:
            self.problem = "PROBLEM: there is no open check to confirm"
            return
        reason = self.ids.reason.text
        for code in list(self._open):
            if self.guard(self.app.finds.confirm, uuid.UUID(self.checked), code, reason) is None:
                return
        self.checks += f"\nFind {self.checked_number} confirmed as recorded: {reason.strip()}"
        self._open, self.has_open = [], False
        self.ids.reason.text = ""

    def take_photo(self) -> None:
        """The photo dialog for the find being corrected, else the find just saved."""
        from ..photo import PhotoDialog, photo_controller

        find_id, number = (self.editing, self.editing_number) if self.editing else (self.checked, self.checked_number)
        if not find_id:
            return
        photos = photo_controller(self.app)
        target = photos.of_find(uuid.UUID(find_id), int(number))
        def kept(photo: object) -> None:
            self.summary = f"Photo P{photo.number} of {target.label} kept."  # type: ignore[attr-defined]
            self._show_photo()

        self.dialog = PhotoDialog(photos, target, kept)
        self.dialog.open()

    def _show_photo(self) -> None:
        """The newest photo of the find whose checks are shown (the one just saved, or being corrected): its line
        at once, its thumbnail when the thumbnail worker has made it (a grey placeholder meanwhile)."""
        from ..photo import photo_controller
        from ..thumbs import thumbnails

        thumbnails().cancel(self._thumb_ticket)
        self._thumb_ticket, self._thumb_for, self.photo_waiting = None, None, False
        self.photo_thumb, self.photo_line, self.photo_id, self.photo_number = "", "", "", ""
        if not self.checked or self.app.days.day is None:
            return
        photos = photo_controller(self.app)
        photo = photos.newest_photo(uuid.UUID(self.checked))
        if photo is None:
            return
        count = len(photos.photos_of(photo.subject_id)) if photo.subject_id else 1
        more = f"\n{count} photos of find {self.checked_number} (the newest shown)" if count > 1 else ""
        self.photo_line, self.photo_waiting = photos.line(photo) + more, True
        self.photo_id, self.photo_number = str(photo.id), f"P{photo.number}"
        shown = (self.checked, photo.sha256)

        def ready(path: str) -> None:
            if self._thumb_for != shown:
                return  # Record shows another find (or another photo) now
            self._thumb_ticket, self.photo_waiting, self.photo_thumb = None, False, path
            if not path:
                self.photo_line = photos.line(photo) + " (file at camp, not on this tablet)" + more

        self._thumb_for = shown
        self._thumb_ticket = thumbnails().ask((str(photos.folder), photo.sha256),
                                              lambda: photos.thumbnail_if_kept(photo), ready)

    def void_photo(self) -> None:
        """Void the photo shown (a wrong one) with the reason typed beside it; the find's next newest photo, if
        any, is shown after."""
        from schema.records import Photo

        from ..photo import photo_controller

        if not self.photo_id:
            return
        photos = photo_controller(self.app)
        photo = self.app.store.get(Photo, uuid.UUID(self.photo_id))
        done = self.guard(photos.void, photo, self.ids.photo_void_reason.text)
        if done is None:
            return
        self.ids.photo_void_reason.text = ""
        self.summary = (f"Photo P{done.number} of find {self.checked_number} voided ({done.void_reason}); it stays "
                        "in the photo register, marked void.")
        self._show_photo()

    def new_find(self) -> None:
        """Leave a correction (nothing written) or clear the form: the next new find."""
        self._open, self.has_open = [], False
        self.checks, self.checked, self.checked_number, self.summary = "", "", "", ""
        from ..thumbs import thumbnails

        thumbnails().cancel(self._thumb_ticket)
        self.photo_thumb, self.photo_line, self.photo_waiting, self._thumb_for = "", "", False, None
        self.photo_id, self.photo_number = "", ""
        self._ready_for_next()

    def correct_checked(self) -> None:
        if self.checked:
            self.load_find(self.checked)

    def load_find(self, find_id: str) -> None:
        """Open a saved find in the form to correct it (from the Finds screen, or after its save): its number,
        unit, category, fields and position method as saved; a new shot or reading moves it."""
        from schema.records import Find

        find = self.app.store.get(Find, uuid.UUID(find_id))
        self._ready_for_next()
        self.set_category(find.category)
        self.ids.form.set_values(find.model_dump())
        self.editing, self.editing_number = find_id, str(find.number)
        self.ids.unit.text = self._unit_code(find.unit_id)
        self._spits()
        mode = {"total_station": "shot", "gnss": "gnss", "tape": "tape"}.get(find.position_source, "sieve")
        self.set_mode(mode)
        how = {"total_station": "total station", "gnss": "GNSS", "tape": "tape"}.get(find.position_source, "sieve, no point")
        self.now_at = (f"Now: unit {self.ids.unit.text}, {how}"
                       + (f" E {find.e:.3f} N {find.n:.3f} Z {find.z:.3f}" if find.e is not None else "")
                       + ". A new shot or reading moves it; leave it empty to keep the position.")
        checks = self.app.finds.open_checks(find.id)
        self._open = [c["code"] for c in checks if c["confirmed_reason"] is None]
        self.checked, self.checked_number = find_id, str(find.number)
        self.has_open = bool(self._open)
        self.summary = f"Correcting find {find.number}: change what is wrong, then Save correction."
        self.checks = f"Correcting find {find.number}." + "".join(
            f"\n{c['severity'].upper()} {c['code']}: {c['message']}. Fix: {c['fix']}" for c in checks)
        self._show_photo()
