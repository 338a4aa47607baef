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

from schema.errors import CautionUnanswered, FieldProblem, RecordInvalid, RecordNotFound
from schema.forms import FormField, coerce, find_form, typed_values
from schema.records import ControlPoint, Find, SafetyCheck, Sample, Spit, Unit
from schema.strata import Issue
from schema.tables import metadata

from ..cautions import Caution, human_remains_caution, shoring_caution, shoring_due
from ..checks import check_find
from ..instruments import parse_shot_line
from ..recording import record_gnss_find, record_plotted_find
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


@dataclass
class Saved:
    """A saved find with what the live checks say now and any caution to answer."""

    find: Find
    issues: list[Issue] = field(default_factory=list)
    cautions: list[Caution] = field(default_factory=list)

    @property
    def clean(self) -> bool:
        return not [i for i in self.issues if i.severity != "info"]


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
               human_remains_notified: str | None = None, possible_human_remains: bool = False) -> Saved:
        """Save a new find of ``category`` in the current unit; see ``Position`` for the ways to place it."""
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
                    kind="human_remains", answer="work stopped at the spot; the spot secured",
                    notified=(human_remains_notified or "").strip(), recorder=day.recorder, checked_at=day.now()))
        return Saved(find, self._check(find), shoring_for(self.store, day, find.z))

    def _place(self, day: Day, base: dict[str, Any], position: Position, sample: dict[str, Any] | None) -> Find:
        if position.source == "shot":
            setup = self.days.require_setup()
            reading, _unit = parse_shot_line(position.shot_line or "", at=base["found_at"])
            return record_plotted_find(self.store, setup=setup, reading=reading, find=base, sample=sample)
        if position.source == "gnss":
            return record_gnss_find(self.store, site=day.site, sentences=self.days.gnss.sentences, find=base,
                                    override_reason=position.override_reason, sample=sample)
        if position.source == "tape":
            return self.store.save_find(find={**base, **self._taped(day, position), "position_source": "tape",
                                              "position_sigma_m": TAPE_SIGMA_M}, sample=sample)
        spit = self._spit(day, position.spit)
        return self.store.save_find(find={**base, "spit_id": spit.id, "bucket": position.bucket}, sample=sample)

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
            kept = dict(conn.execute(sa.select(live_check.c.code, live_check.c.confirmed_reason)
                                     .where(live_check.c.find_id == find.id)).all())
            conn.execute(live_check.delete().where(live_check.c.find_id == find.id))
            rows = {i.code: {"find_id": find.id, "code": i.code, "severity": i.severity, "message": i.message,
                             "fix": i.fix, "confirmed_reason": kept.get(i.code)} for i in issues if i.severity != "info"}
            if rows:
                conn.execute(live_check.insert(), list(rows.values()))
        return issues

    def open_checks(self, find_id: uuid.UUID) -> list[dict[str, Any]]:
        """The checks this find fails now, with the recorder's confirmation where given."""
        with self.store.read() as conn:
            return [dict(r._mapping) for r in conn.execute(sa.select(live_check).where(live_check.c.find_id == find_id)
                                                           .order_by(live_check.c.severity, live_check.c.code))]

    def confirm(self, find_id: uuid.UUID, code: str, reason: str) -> Find:
        """Keep the find as it is despite check ``code``; the reason goes into its notes (and so to the camp)."""
        if not reason.strip():
            raise RecordInvalid("find", [FieldProblem("reason", "a confirmation needs a reason", "say why the find is right as recorded")])
        with self.store.atomic() as conn:
            hit = conn.execute(live_check.update().where(live_check.c.find_id == find_id, live_check.c.code == code)
                               .values(confirmed_reason=reason.strip()))
            if hit.rowcount == 0:
                raise RecordNotFound(f"check {code} is not open on this find; nothing to confirm")
            find = self.store.get(Find, find_id)
            note = f"[confirmed {code}: {reason.strip()}]"
            find = self.store.put(find.model_copy(update={"notes": f"{find.notes}\n{note}".strip()}))
        return find

    def edit(self, find_id: uuid.UUID, changes: dict[str, Any]) -> Saved:
        """Correct fields of a find (strings from the form are typed by its fields); re-runs the live checks."""
        current = self.store.get(Find, find_id)
        typed = typed_values(self.form(current.category), changes)
        if "unit_code" in typed:
            code = typed.pop("unit_code")
            unit = next((u for u in self.store.list(Unit, trench_id=current.trench_id) if u.code == code), None)
            if unit is None:
                raise RecordNotFound(f"no unit {code!r} in this find's trench; choose one from the list")
            typed["unit_id"] = unit.id
        find = self.store.update_find(find={**current.model_dump(), **typed})  # a new number: the rules of a save
        return Saved(find, self._check(find))

    def void(self, find_id: uuid.UUID, reason: str) -> Find:
        """Void a find (it keeps its number; nothing is deleted); its open checks are closed."""
        if not reason.strip():
            raise RecordInvalid("find", [FieldProblem("void_reason", "a void needs a reason", "say why the find is voided")])
        with self.store.atomic() as conn:
            find = self.store.void_find(find_id=find_id, reason=reason.strip())
            conn.execute(live_check.delete().where(live_check.c.find_id == find_id))
        return find

    def sample_of(self, find: Find) -> Sample | None:
        found = self.store.list(Sample, find_id=find.id)
        return found[0] if found else None
