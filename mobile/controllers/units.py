"""Units on the tablet: the list and form (kind, description, Munsell colour, texture, status), relations to
other units (checked against the matrix at once; a wrong one is voided with a reason, never deleted), and level
points on a unit's top or bottom from shots."""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from typing import Any

from schema import vocab
from schema.errors import FieldProblem, RecordInvalid, RecordNotFound
from schema.forms import FormField, typed_values, unit_form
from schema.records import LevelPoint, Relation, Unit
from schema.strata import Issue
from schema.validation import check

from ..cautions import Caution
from ..checks import Rechecked, check_matrix, recheck_units
from ..instruments import parse_shot_line
from ..recording import reduce_reading
from ..store import TabletStore
from .day import DayController
from .finds import shoring_for

__all__ = ["RelationLine", "RestoredRelation", "UnitsController", "VoidedRelation"]


@dataclass
class Related:
    """A saved relation and the matrix problems that involve its two units."""

    relation: Relation
    issues: list[Issue] = field(default_factory=list)
    rechecked: Rechecked = field(default_factory=Rechecked)  # the two units' finds, checked again


@dataclass(frozen=True)
class RelationLine:
    """One relation naming a unit, as the Units screen lists it."""

    relation_id: uuid.UUID
    upper: str  # unit codes ("?" for a unit this tablet does not hold)
    kind: str
    lower: str
    void_reason: str | None = None  # None: the relation is in force

    @property
    def voided(self) -> bool:
        return self.void_reason is not None

    def plain(self) -> str:
        """``103 above 101``: the relation in words, in force or not."""
        return f"{self.upper} {vocab.words(self.kind)} {self.lower}"

    def words(self) -> str:
        """``103 above 102``, or ``VOIDED 103 above 102 (why)`` for a voided one."""
        text = self.plain()
        return f"VOIDED {text} ({self.void_reason})" if self.voided else text


@dataclass
class VoidedRelation:
    """A voided relation and what the matrix and the two units' finds say without it."""

    line: RelationLine
    issues: list[Issue] = field(default_factory=list)  # matrix problems still naming the two units
    rechecked: Rechecked = field(default_factory=Rechecked)


@dataclass
class RestoredRelation(VoidedRelation):
    """A voided relation put back in force, and what the matrix and the two units' finds say with it again."""


class UnitsController:
    def __init__(self, store: TabletStore, day: DayController):
        self.store, self.days = store, day
        self.last_recheck = Rechecked()

    @staticmethod
    def form() -> list[FormField]:
        return unit_form()

    def units(self) -> list[Unit]:
        return self.days.units()

    def unit(self, code: str) -> Unit:
        day = self.days.require_day()
        found = self.store.list(Unit, site_id=day.site.id, code=code)
        if not found:
            raise RecordNotFound(f"no unit {code!r} at {day.site.code}; check the code or add the unit")
        return found[0]

    def save_unit(self, values: dict[str, Any], *, code: str | None = None) -> Unit:
        """A new unit in today's trench, or (``code`` given) changes to that unit; strings are typed by the form.
        Closing a unit without a date closes it today."""
        day = self.days.require_day()
        typed = {k: v for k, v in typed_values(self.form(), values).items() if v is not None or code is not None}
        if typed.get("status") == "closed" and not typed.get("closed_on"):
            typed["closed_on"] = day.now().date()
        if code is None:
            data = {"site_id": day.site.id, "trench_id": day.trench.id, "opened_on": day.now().date(),
                    "recorder": day.recorder, **typed}
            return self.store.add(check(Unit, data))
        current = self.unit(code)
        return self.store.put(check(Unit, {**current.model_dump(), **typed}))

    def relations(self, code: str) -> list[RelationLine]:
        """Every relation naming the unit, in force first, then voided ones (kept, never deleted)."""
        unit = self.unit(code)
        by_id = {u.id: u.code for u in self.store.list(Unit, site_id=unit.site_id)}
        out = [_line(r, by_id) for r in self.store.list(Relation, site_id=unit.site_id)
               if unit.id in (r.upper_unit_id, r.lower_unit_id)]
        return sorted(out, key=lambda x: (x.voided, x.upper, x.kind, x.lower, str(x.relation_id)))

    def void_relation(self, relation_id: uuid.UUID, reason: str) -> VoidedRelation:
        """Void a wrong relation with the recorder's reason: a new version of the relation (it syncs like every
        edit), left out of the matrix from now on; the matrix is checked again and the two units' finds too."""
        if not reason.strip():
            raise RecordInvalid("void of the relation", [FieldProblem(
                "reason", "voiding a relation needs a reason", "say why the relation is wrong, e.g. 'recorded the "
                "wrong way round'")])
        current = self.store.get(Relation, relation_id)
        if current.voided:
            raise RecordInvalid("void of the relation", [FieldProblem(
                "relation", f"it is already voided ({current.void_reason})", "nothing more to do")])
        voided = self.store.put(check(Relation, {**current.model_dump(), "voided": True,
                                                 "void_reason": reason.strip()}))
        by_id = {u.id: u.code for u in self.store.list(Unit, site_id=voided.site_id)}
        codes = {by_id.get(voided.upper_unit_id, "?"), by_id.get(voided.lower_unit_id, "?")}
        mine = {str(voided.upper_unit_id), str(voided.lower_unit_id)}
        issues = [i for i in check_matrix(self.store)
                  if i.record_id in mine or codes & set(i.label.replace(",", " ").split())]
        return VoidedRelation(_line(voided, by_id), issues,
                              recheck_units(self.store, [voided.upper_unit_id, voided.lower_unit_id]))

    def restore_relation(self, relation_id: uuid.UUID, reason: str) -> RestoredRelation:
        """Put a voided relation back in force with the recorder's reason (kept in its ``void_reason`` as
        "restored (AK): why"; only ``voided`` makes a relation void): a new version that syncs like the void did;
        the matrix and the two units' finds are checked again."""
        day = self.days.require_day()
        if not reason.strip():
            raise RecordInvalid("restore of the relation", [FieldProblem(
                "reason", "restoring a relation needs a reason", "say why the relation was right after all, e.g. "
                "'the section drawing confirms it'")])
        current = self.store.get(Relation, relation_id)
        if not current.voided:
            raise RecordInvalid("restore of the relation", [FieldProblem(
                "relation", "it is in force, not voided", "nothing to restore")])
        restored = self.store.put(check(Relation, {**current.model_dump(), "voided": False,
                                                   "void_reason": f"restored ({day.recorder}): {reason.strip()}"}))
        by_id = {u.id: u.code for u in self.store.list(Unit, site_id=restored.site_id)}
        codes = {by_id.get(restored.upper_unit_id, "?"), by_id.get(restored.lower_unit_id, "?")}
        mine = {str(restored.id), str(restored.upper_unit_id), str(restored.lower_unit_id)}
        issues = [i for i in check_matrix(self.store)
                  if i.record_id in mine or codes & set(i.label.replace(",", " ").split())]
        return RestoredRelation(_line(restored, by_id), issues,
                                recheck_units(self.store, [restored.upper_unit_id, restored.lower_unit_id]))

    def relate(self, *, upper: str, lower: str, kind: str) -> Related:
        """Record that ``upper`` is above / cuts / fills / is the same as / contemporary with ``lower``; the matrix
        is checked at once (a cycle or a fill of a non-cut is shown, not refused: the data manager decides)."""
        a, b = self.unit(upper), self.unit(lower)
        relation = self.store.add(check(Relation, {"site_id": a.site_id, "upper_unit_id": a.id, "lower_unit_id": b.id,
                                                   "kind": kind}))
        mine = {str(relation.id), str(a.id), str(b.id)}
        issues = [i for i in check_matrix(self.store)
                  if i.record_id in mine or {a.code, b.code} & set(i.label.replace(",", " ").split())]
        return Related(relation, issues, recheck_units(self.store, [a.id, b.id]))

    def level_point(self, *, unit: str, surface: str, shot_line: str) -> tuple[LevelPoint, list[Caution]]:
        """A level on a unit's top or bottom from a shot (raw shot kept); returns the shoring caution when the
        level is past the site's check depth and the trench has not been checked today. ``last_recheck`` says
        what the unit's finds' checks became with the new surface."""
        day = self.days.require_day()
        target = self.unit(unit)
        setup = self.days.require_setup()
        reading, _ = parse_shot_line(shot_line, at=day.now(), template=self.days.template)
        shot, (e, n, z) = reduce_reading(setup, reading)
        with self.store.atomic():  # a bad surface is refused by the model, and the shot goes with it
            self.store.add(shot)
            point = self.store.add(check(LevelPoint, {"unit_id": target.id, "surface": surface, "e": e, "n": n, "z": z,
                                                      "shot_id": shot.id}))
        self.last_recheck = recheck_units(self.store, [target.id])
        return point, shoring_for(self.store, day, z)


def _line(r: Relation, code_of: dict[uuid.UUID, str]) -> RelationLine:
    return RelationLine(r.id, code_of.get(r.upper_unit_id, "?"), r.kind, code_of.get(r.lower_unit_id, "?"),
                        r.void_reason if r.voided else None)
