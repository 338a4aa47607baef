"""Units on the tablet: the list and form (kind, description, Munsell colour, texture, status), relations to
other units (checked against the matrix at once), and level points on a unit's top or bottom from shots."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from schema.errors import RecordNotFound
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

__all__ = ["UnitsController"]


@dataclass
class Related:
    """A saved relation and the matrix problems that involve its two units."""

    relation: Relation
    issues: list[Issue] = field(default_factory=list)
    rechecked: Rechecked = field(default_factory=Rechecked)  # the two units' finds, checked again


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

    def relations(self, code: str) -> list[tuple[str, str, str]]:
        """(this unit's role, relation kind, other unit's code) for every relation naming the unit."""
        unit = self.unit(code)
        by_id = {u.id: u.code for u in self.store.list(Unit, site_id=unit.site_id)}
        out = []
        for r in self.store.list(Relation, site_id=unit.site_id):
            if r.upper_unit_id == unit.id:
                out.append(("upper", r.kind, by_id.get(r.lower_unit_id, "?")))
            elif r.lower_unit_id == unit.id:
                out.append(("lower", r.kind, by_id.get(r.upper_unit_id, "?")))
        return sorted(out)

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
        reading, _ = parse_shot_line(shot_line, at=day.now())
        shot, (e, n, z) = reduce_reading(setup, reading)
        with self.store.atomic():  # a bad surface is refused by the model, and the shot goes with it
            self.store.add(shot)
            point = self.store.add(check(LevelPoint, {"unit_id": target.id, "surface": surface, "e": e, "n": n, "z": z,
                                                      "shot_id": shot.id}))
        self.last_recheck = recheck_units(self.store, [target.id])
        return point, shoring_for(self.store, day, z)
