"""Recording a find: category first, then only the fields it needs; the position from a shot, GNSS, tape or
none (a sieve find, with its spit and bucket); the number from the device's block; the find, its raw
observation, its sample details and any caution answer saved in one transaction. The live checks run right
after; the recorder corrects the find or confirms it with a reason. Finds are edited and voided, never deleted.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from typing import Any, Literal

import sqlalchemy as sa

from schema.errors import CautionUnanswered, FieldProblem, FixNotAccepted, RecordInvalid, RecordNotFound
from schema.forms import FormField, coerce, find_form, typed_values
from schema.records import ControlPoint, Find, SafetyCheck, Sample, Spit, Unit
from schema.strata import Issue
from schema.tables import metadata

from ..cautions import Caution, human_remains_caution, shoring_caution, shoring_due
from ..checks import check_find, keep_checks
from ..instruments import parse_shot_line
from ..recording import gnss_fields, plotted_fields
from ..store import TabletStore
from ..tables import live_check
from .day import Day, DayController

__all__ = ["FindController", "Position", "Saved", "ground_z"]

SEVERITY_ORDER = {"error": 0, "warning": 1, "info": 2}
TAPE_SIGMA_M = 0.02  # a taped offset and a line level: about 2 cm (common practice, no source)


@dataclass(frozen=True)
class Position:
    """How the find's position was taken.

    ``shot``: a BKS line from the total station (the accepted setup reduces it); ``gnss``: the receiver's latest
    epoch (RTK fixed, or ``override_reason``); ``tape``: offsets east and north from a control point and the depth
    below it; ``sieve``: no point, the spit number and bucket label instead.
    """

    source: Literal["shot", "gnss", "tape", "sieve"]
    shot_line: str | None = None
    override_reason: str | None = None
    tape_from: str | None = None
    tape_east_m: float | None = None
    tape_north_m: float | None = None
    tape_depth_m: float | None = None
    spit: int | None = None
    bucket: str | None = None
    old_fix_reason: str | None = None  # why a GNSS fix that is old or already used places this find anyway

    def given(self) -> bool:
        """True when a correction carries a new position (a shot line, taped offsets, a spit)."""
        if self.source == "shot":
            return bool((self.shot_line or "").strip())
        if self.source == "tape":
            return any(v is not None for v in (self.tape_east_m, self.tape_north_m, self.tape_depth_m))
        if self.source == "sieve":
            return self.spit is not None
        return True  # gnss: the receiver's latest fix, checked for age and reuse


@dataclass
class Saved:
    """A saved find with what the live checks say now and any caution to answer."""

    find: Find
    issues: list[Issue] = field(default_factory=list)
    cautions: list[Caution] = field(default_factory=list)
    written: list[str] = field(default_factory=list)  # a correction: each change as "field old -> new"

    @property
    def clean(self) -> bool:
        return not [i for i in self.issues if i.severity != "info"]


def _shown(value: Any) -> str:
    if value is None or value == "":
        return "-"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value).replace("_", " ")


def _affirmed_answer(affirmed: tuple[str, ...] | list[str]) -> str:
    """The steps of the human-remains caution the recorder ticked, in the caution's order; nothing else."""
    known = human_remains_caution().affirm
    unknown = [a for a in affirmed if a not in known]
    if unknown:
        raise RecordInvalid("safety check", [FieldProblem("answer", f"{unknown[0]!r} is not a step of this caution",
                                                          "tick the steps shown in the caution")])
    done = [a for a in known if a in affirmed]
    return "; ".join(done) if done else "no step affirmed beyond who was notified"


def ground_z(store: TabletStore, trench_id: uuid.UUID) -> float | None:
    """The trench's surface: the highest level point on any of its units' top surfaces (None before any)."""
    lp, unit = metadata.tables["level_point"], metadata.tables["unit"]
    with store.read() as conn:
        return conn.execute(sa.select(sa.func.max(lp.c.z)).select_from(lp.join(unit, unit.c.id == lp.c.unit_id))
                            .where(unit.c.trench_id == trench_id, lp.c.surface == "top")).scalar()


def shoring_for(store: TabletStore, day: Day, z: float | None) -> list[Caution]:
    """The shoring caution when a level at ``z`` is past the site's depth and not yet checked today."""
    top = ground_z(store, day.trench.id)
    if z is None or top is None:
        return []
    depth = round(top - z, 3)
    checks = store.list(SafetyCheck, trench_id=day.trench.id)
    if shoring_due(depth_m=depth, limit_m=day.site.shoring_check_depth_m, checks=checks, trench_id=day.trench.id,
                   today=day.now().date(), tz=day.tz):
        return [shoring_caution(depth, day.site.shoring_check_depth_m)]
    return []


class FindController:
    """Everything the record screen does."""

    def __init__(self, store: TabletStore, day: DayController):
        self.store, self.days = store, day

    # -- the form -----------------------------------------------------------------------------------------
    @staticmethod
    def form(category: str) -> list[FormField]:
        return find_form(category)

    def next_number(self) -> int:
        return self.store.next_find_number()

    def _typed(self, category: str, values: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
        """Form values (strings from widgets, or typed values) split into find fields and sample details."""
        find, sample = {}, {}
        for f in self.form(category):
            if f.name not in values:
                continue
            raw = values[f.name]
            value = coerce(f, raw) if isinstance(raw, str) else raw
            if value is None:
                continue
            (find if f.name in Find.model_fields else sample)[f.name] = value
        unknown = set(values) - {f.name for f in self.form(category)}
        if unknown:
            raise RecordInvalid("find", [FieldProblem(sorted(unknown)[0], f"a {category} does not take this field",
                                                      "leave it out, or change the category")])
        return find, sample

    # -- recording ------------------------------------------------------------------------------------------
    def record(self, *, category: str, values: dict[str, Any], position: Position,
               human_remains_notified: str | None = None, possible_human_remains: bool = False,
               human_remains_affirmed: tuple[str, ...] | list[str] = ()) -> Saved:
        """Save a new find of ``category`` in the current unit; see ``Position`` for the ways to place it. With
        possible human remains, the safety record holds who was notified and only the steps the recorder
        affirmed (``human_remains_affirmed``, from the caution's ``affirm`` list)."""
        day = self.days.require_day()
        if day.unit is None:
            raise RecordInvalid("find", [FieldProblem("unit", "no unit is chosen", "choose the unit being dug on Record or Units")])
        if possible_human_remains and not (human_remains_notified or "").strip():
            c = human_remains_caution()
            raise CautionUnanswered(f"{c.title}. {c.text} {c.ask}")
        find_values, sample = self._typed(category, values)
        base = {**find_values, "number": self.store.next_find_number(), "site_id": day.site.id,
                "season_id": day.season.id, "trench_id": day.trench.id, "unit_id": day.unit.id, "category": category,
                "recovery": "sieved" if position.source == "sieve" else "plotted", "found_at": day.now(),
                "recorder": day.recorder, "human_remains": possible_human_remains}
        details = sample if category == "sample" else None
        with self.store.atomic():
            find = self._place(day, base, position, details)
            if possible_human_remains:
                self.store.add(SafetyCheck(
                    site_id=day.site.id, trench_id=day.trench.id, unit_id=day.unit.id, find_id=find.id,
                    kind="human_remains", answer=_affirmed_answer(human_remains_affirmed),
                    notified=(human_remains_notified or "").strip(), recorder=day.recorder, checked_at=day.now()))
        return Saved(find, self._check(find), shoring_for(self.store, day, find.z))

    def _place(self, day: Day, base: dict[str, Any], position: Position, sample: dict[str, Any] | None) -> Find:
        raw, fields = self._position_fields(day, position, at=base["found_at"])
        note = fields.pop("_note", None)
        if note:
            base = {**base, "notes": f"{base.get('notes') or ''}\n{note}".strip()}
        if raw is not None:
            self.store.add(raw)
        return self.store.save_find(find={**base, **fields}, sample=sample)

    def _position_fields(self, day: Day, position: Position, *, at: Any) -> tuple[Any, dict[str, Any]]:
        """The raw observation to keep (a shot, a GNSS fix, or None) and the find fields a position sets."""
        none = {"e": None, "n": None, "z": None, "shot_id": None, "gnss_fix_id": None, "spit_id": None, "bucket": None}
        if position.source == "shot":
            setup = self.days.require_setup()
            if not (position.shot_line or "").strip():
                raise RecordInvalid("find", [FieldProblem("shot", "no position was taken: there is no shot for this "
                                                          "find", "tap Take shot, or type the instrument's readings and "
                                                          "tap Use (or choose GNSS, Tape or Sieve)")])
            reading, _unit = parse_shot_line(position.shot_line or "", at=at, template=self.days.template)
            shot, fields = plotted_fields(setup, reading)
            return shot, {**none, **fields, "recovery": "plotted"}
        if position.source == "gnss":
            note = self._fresh_fix(position)
            fix, fields = gnss_fields(site=day.site, sentences=self.days.gnss.sentences, at=at,
                                      override_reason=position.override_reason)
            return fix, {**none, **fields, "recovery": "plotted", **({"_note": note} if note else {})}
        if position.source == "tape":
            return None, {**none, **self._taped(day, position), "position_source": "tape",
                          "position_sigma_m": TAPE_SIGMA_M, "recovery": "plotted"}
        spit = self._spit(day, position.spit)
        return None, {**none, "spit_id": spit.id, "bucket": position.bucket, "position_source": "none",
                      "position_sigma_m": None, "recovery": "sieved"}

    def _fresh_fix(self, position: Position) -> str | None:
        """Refuses a fix that is too old or already placed a find, unless a reason is given (returned as a note)."""
        if self.days.gnss.latest is None:
            raise FixNotAccepted("no GNSS fix has been read; tap Read receiver")
        problems = self.days.gnss_problems()
        if not problems:
            return None
        reason = (position.old_fix_reason or "").strip()
        if not reason:
            raise FixNotAccepted("; ".join(problems) + ". Tap Read receiver for a fresh fix, or say why this one "
                                 "is right for this find")
        return f"[GNSS: {'; '.join(problems)}; used because: {reason}]"

    def _taped(self, day: Day, p: Position) -> dict[str, float]:
        missing = [n for n, v in (("tape_from", p.tape_from), ("tape_east_m", p.tape_east_m),
                                  ("tape_north_m", p.tape_north_m), ("tape_depth_m", p.tape_depth_m)) if v is None]
        if missing:
            raise RecordInvalid("find", [FieldProblem(m, "a taped position needs it", "give the datum and all three "
                                                      "offsets (east, north, depth below the datum)") for m in missing])
        cp = next((c for c in self.store.list(ControlPoint, site_id=day.site.id) if c.code == p.tape_from), None)
        if cp is None:
            raise RecordNotFound(f"no control point {p.tape_from!r} to tape from; choose one from the list")
        return {"e": cp.e + float(p.tape_east_m), "n": cp.n + float(p.tape_north_m),  # type: ignore[arg-type]
                "z": cp.z - float(p.tape_depth_m)}  # type: ignore[arg-type]

    def _spit(self, day: Day, number: int | None) -> Spit:
        assert day.unit is not None
        spits = self.store.list(Spit, unit_id=day.unit.id, order_by="number")
        spit = next((s for s in spits if s.number == number), None)
        if spit is None:
            have = ", ".join(str(s.number) for s in spits) or "none yet"
            raise RecordInvalid("find", [FieldProblem("spit", f"unit {day.unit.code} has no spit {number} (it has: {have})",
                                                      "choose the spit the bucket came from")])
        return spit

    # -- checks, corrections, confirmations -------------------------------------------------------------------
    def _check(self, find: Find) -> list[Issue]:
        """Run the live checks on the tablet's data and keep their result (confirmations of codes that still
        apply are kept)."""
        issues = sorted(check_find(self.store, find), key=lambda i: SEVERITY_ORDER.get(i.severity, 3))
        with self.store.atomic() as conn:
            keep_checks(conn, find.id, issues)
        return issues

    def open_checks(self, find_id: uuid.UUID) -> list[dict[str, Any]]:
        """The checks this find fails now, with the recorder's confirmation where given."""
        with self.store.read() as conn:
            return [dict(r._mapping) for r in conn.execute(sa.select(live_check).where(live_check.c.find_id == find_id)
                                                           .order_by(live_check.c.severity, live_check.c.code))]

    def confirm(self, find_id: uuid.UUID, code: str, reason: str) -> Find:
        """Keep the find as it is despite check ``code``; the reason goes into its notes (and so to the camp)."""
        what = f"confirmation of find {self.store.get(Find, find_id).number}"  # a refusal names what was refused
        if not reason.strip():
            raise RecordInvalid(what, [FieldProblem("reason", "a confirmation needs a reason",
                                                    "say why the find is right as recorded")])
        with self.store.atomic() as conn:
            hit = conn.execute(live_check.update().where(live_check.c.find_id == find_id, live_check.c.code == code)
                               .values(confirmed_reason=reason.strip()))
            if hit.rowcount == 0:
                raise RecordNotFound(f"check {code} is not open on this find; nothing to confirm")
            find = self.store.get(Find, find_id)
            note = f"[confirmed {code}: {reason.strip()}]"
            try:
                find = self.store.put(find.model_copy(update={"notes": f"{find.notes}\n{note}".strip()}))
            except RecordInvalid as exc:  # the reason made the notes too long: the confirmation was refused
                raise RecordInvalid(what, [FieldProblem("reason", p.message, "give a shorter reason")
                                           if p.field == "notes" else p for p in exc.problems]) from None
        return find

    def edit(self, find_id: uuid.UUID, changes: dict[str, Any], *, position: Position | None = None,
             unit_code: str | None = None) -> Saved:
        """Correct a find: fields from the form (strings typed by its fields), a new position when one was taken
        (``Position.given``), another unit of its trench; re-runs the live checks. ``Saved.written`` names each
        change that was written, and nothing else."""
        current = self.store.get(Find, find_id)
        typed = typed_values(self.form(current.category), changes)
        code = typed.pop("unit_code", None) or unit_code
        if code:
            units = self.store.list(Unit, trench_id=current.trench_id)
            unit = next((u for u in units if u.code == code), None)
            if unit is None:
                raise RecordNotFound(f"no unit {code!r} in this find's trench; choose one from the list")
            typed["unit_id"] = unit.id
        day = self.days.require_day() if position is not None and position.given() else None
        with self.store.atomic():
            if day is not None:
                assert position is not None
                if position.source == "sieve":  # the spit belongs to the find's (new) unit
                    day = Day(day.site, day.season, day.trench, day.recorder,
                              unit=self.store.get(Unit, typed.get("unit_id", current.unit_id)), setup=day.setup)
                raw, fields = self._position_fields(day, position, at=day.now())
                note = fields.pop("_note", None)
                if note:
                    typed["notes"] = f"{typed.get('notes', current.notes) or ''}\n{note}".strip()
                if raw is not None:
                    self.store.add(raw)
                typed.update(fields)
            find = self.store.update_find(find={**current.model_dump(), **typed})  # a new number: the rules of a save
        return Saved(find, self._check(find), written=self._written(current, find))

    def _written(self, before: Find, after: Find) -> list[str]:
        """Each visible change as words ("unit 102 -> 103", "Z 99.512 -> 99.430")."""
        units = {u.id: u.code for u in self.store.list(Unit, trench_id=after.trench_id)}
        out = []
        for name in Find.model_fields:
            old, new = getattr(before, name), getattr(after, name)
            if old == new or name in ("shot_id", "gnss_fix_id", "spit_id"):
                continue
            if name == "unit_id":
                out.append(f"unit {units.get(old, '?')} -> {units.get(new, '?')}")
            elif name in ("e", "n", "z"):
                was, now = ("-" if v is None else f"{v:.3f}" for v in (old, new))
                if was != now:  # a change below the millimetre is not shown as one
                    out.append(f"{name.upper()} {was} -> {now}")
            elif name == "notes":
                out.append("notes")
            else:
                out.append(f"{name.replace('_', ' ')} {_shown(old)} -> {_shown(new)}")
        if before.spit_id != after.spit_id and after.spit_id is not None:
            out.append(f"spit {self.store.get(Spit, after.spit_id).number}")
        return out

    def void(self, find_id: uuid.UUID, reason: str) -> Find:
        """Void a find (it keeps its number; nothing is deleted); its open checks are closed."""
        what = f"void of find {self.store.get(Find, find_id).number}"  # a refusal names what was refused
        if not reason.strip():
            raise RecordInvalid(what, [FieldProblem("reason", "a void needs a reason", "say why the find is voided")])
        with self.store.atomic() as conn:
            try:
                find = self.store.void_find(find_id=find_id, reason=reason.strip())
            except RecordInvalid as exc:  # e.g. a reason longer than the record keeps
                raise RecordInvalid(what, exc.problems) from None
            conn.execute(live_check.delete().where(live_check.c.find_id == find_id))
        return find

    def sample_of(self, find: Find) -> Sample | None:
        found = self.store.list(Sample, find_id=find.id)
        return found[0] if found else None
