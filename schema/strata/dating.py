"""Age brackets implied by superposition, and dates that contradict the matrix.

A unit is younger than every dated unit beneath it and older than every dated unit above it (law of
superposition; common practice, no source). Each date enters as its two-sigma range (age +- 2 sigma), so a
bracket is the widest reading of the evidence: a unit's oldest possible age is the smallest (age + 2 sigma) of
the dated units below it, its youngest the largest (age - 2 sigma) of those above. Two dates contradict the
matrix when the upper unit's date is older than the lower one's beyond both two-sigma ranges.

Brackets are computed outside the matrix's cycles: the units of a circle of relations (MATRIX_CYCLE) get no
bracket and their dates bound nothing, because their place is what is in doubt; every other unit keeps the
order the rest of the matrix gives it (the circle taken as one node). The recorded horizon order tightens the
brackets: a unit in a horizon is younger than every unit of a lower horizon and older than every unit of a
higher one (``Horizon.order``), unless that order contradicts the matrix (HORIZON_ORDER), when the matrix alone
is used and a note says so.

A horizon's bracket (``horizon_age_brackets``) takes the horizon as one correlated layer, the meaning of a
horizon in Baulk: its age lies in every one of its units' brackets at once (their intersection), and it names
the dated units the limits rest on, or the reason there is none (``horizon_brackets`` gives the same as plain
``Bracket`` values, for ``age_brackets.json`` and the demo's summary). Until issue 17 a horizon's bracket was the
span of its units' possible ages (their union), so one undated unit with nothing dated below it left the horizon
open-ended even when the horizon held a date of its own.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field

from ..records import AgeDetermination, Horizon
from .issues import Issue, issue
from .graph import reachability, strongly_connected, topological_order
from .matrix import Matrix

__all__ = ["Bracket", "Brackets", "HorizonBracket", "age_brackets", "age_issues", "bracket_units",
           "date_words", "horizon_age_brackets", "horizon_brackets"]

K = 2.0  # sigmas: a two-sigma range, about 95 % for a normal error


@dataclass(frozen=True)
class Bracket:
    """Ages in ka: ``youngest`` <= age <= ``oldest``; None where nothing bounds that side."""

    youngest: float | None
    oldest: float | None
    dated: bool  # the unit carries a date of its own
    young_from: tuple[uuid.UUID, ...] = ()  # the units whose dates set ``youngest`` (its own, or above it)
    old_from: tuple[uuid.UUID, ...] = ()  # the units whose dates set ``oldest`` (its own, or below it)

    def as_dict(self) -> dict[str, float | bool | None]:
        return {"youngest_ka": self.youngest, "oldest_ka": self.oldest, "dated": self.dated}


def _own(ages: list[AgeDetermination]) -> tuple[float, float]:
    """The two-sigma range of a unit's own dates (their intersection when several agree, else their union)."""
    lo = max(a.age_ka - K * a.sigma_ka for a in ages)
    hi = min(a.age_ka + K * a.sigma_ka for a in ages)
    if lo <= hi:
        return lo, hi
    return min(a.age_ka - K * a.sigma_ka for a in ages), max(a.age_ka + K * a.sigma_ka for a in ages)


@dataclass
class Brackets:
    units: dict[uuid.UUID, Bracket] = field(default_factory=dict)  # unit id -> bracket (none for cyclic units)
    cyclic: set[uuid.UUID] = field(default_factory=set)  # units caught in a circle of relations
    notes: list[str] = field(default_factory=list)


def _levels(matrix: Matrix, horizons: list[Horizon], skip: set[uuid.UUID]) -> dict[uuid.UUID, int]:
    order = {h.id: h.order for h in horizons}
    level: dict[uuid.UUID, int] = {}
    for g, members in matrix.members.items():
        orders = {order[matrix.units[u].horizon_id] for u in members if matrix.units[u].horizon_id in order}
        if g not in skip and len(orders) == 1:
            level[g] = orders.pop()
    return level


def bracket_units(matrix: Matrix, ages: list[AgeDetermination], horizons: list[Horizon] | None = None) -> Brackets:
    """Every unit's bracket outside the matrix's cycles, the horizon order (when given and consistent with the
    matrix) tightening it; see the module's docstring."""
    comps = strongly_connected(matrix.members, matrix.edges)
    node: dict[uuid.UUID, object] = {}
    cyclic_groups: set[uuid.UUID] = set()
    for comp in comps:
        if len(comp) > 1:
            cyclic_groups |= set(comp)
            rep = ("cycle", min(str(g) for g in comp))
            for g in comp:
                node[g] = rep
        else:
            node[comp[0]] = comp[0]
    out = Brackets(cyclic={u for g in cyclic_groups for u in matrix.members[g]})
    edges = {(node[a], node[b]) for a, b in matrix.edges if node[a] != node[b]}
    level = _levels(matrix, horizons or [], cyclic_groups)
    steps = sorted(set(level.values()))
    with_order = set(edges)
    for upper, lower in zip(steps, steps[1:]):
        with_order |= {(g, ("boundary", upper)) for g, k in level.items() if k == upper}
        with_order |= {(("boundary", upper), g) for g, k in level.items() if k == lower}
        with_order.add((("boundary", upper), ("boundary", lower)))
    nodes = [*set(node.values()), *(("boundary", k) for k in steps)]
    try:
        topological_order(nodes, with_order)
        edges = with_order
    except ValueError:
        out.notes.append("the horizon order disagrees with the matrix (see the HORIZON_ORDER checks): the brackets "
                         "use the matrix's order alone")
    below = reachability(nodes, edges)
    by_group: dict[uuid.UUID, list[AgeDetermination]] = {}
    for a in ages:
        g = matrix.group_of.get(a.unit_id)
        if g is not None and g not in cyclic_groups:
            by_group.setdefault(g, []).append(a)
    own = {g: _own(v) for g, v in by_group.items()}
    above: dict[object, set[object]] = {n: set() for n in nodes}
    for n, lower in below.items():
        for b in lower:
            above.setdefault(b, set()).add(n)
    for g, members in matrix.members.items():
        if g in cyclic_groups:
            continue
        older = [(own[d][1], d) for d in below.get(g, ()) if d in own]
        younger = [(own[d][0], d) for d in above.get(g, ()) if d in own]
        if g in own:
            older.append((own[g][1], g))
            younger.append((own[g][0], g))
        old = min((v for v, _ in older), default=None)
        young = max((v for v, _ in younger), default=None)
        old_from = tuple(sorted((u for v, d in older if v == old for u in by_unit(matrix, d, by_group)), key=str))
        young_from = tuple(sorted((u for v, d in younger if v == young for u in by_unit(matrix, d, by_group)), key=str))
        for u in members:
            out.units[u] = Bracket(young, old, g in own, young_from, old_from)
    return out


def by_unit(matrix: Matrix, group: object, by_group: dict[uuid.UUID, list[AgeDetermination]]) -> list[uuid.UUID]:
    """The dated units of a same-as group."""
    return sorted({a.unit_id for a in by_group.get(group, [])}, key=str)  # type: ignore[call-overload]


def age_brackets(matrix: Matrix, ages: list[AgeDetermination],
                 horizons: list[Horizon] | None = None) -> dict[uuid.UUID, Bracket]:
    """For every unit outside the matrix's cycles, the bracket implied by the dated units above and below it
    (and, given ``horizons``, by the horizon order)."""
    return bracket_units(matrix, ages, horizons).units


@dataclass(frozen=True)
class HorizonBracket:
    """A horizon's age bracket taken as one correlated layer (ka), or the reason there is none."""

    youngest: float | None
    oldest: float | None
    dated: bool
    young_from: tuple[uuid.UUID, ...] = ()
    old_from: tuple[uuid.UUID, ...] = ()
    reason: str = ""


def horizon_age_brackets(brackets: Brackets, matrix: Matrix, horizons: list[Horizon]) -> dict[uuid.UUID, HorizonBracket]:
    """Each horizon's age: inside every one of its units' brackets (their intersection), with the units whose
    dates set each limit; the reason when nothing bounds it, when its units' brackets do not meet, or when its
    units are all caught in a cycle."""
    code = {u: x.code for u, x in matrix.units.items()}
    out = {}
    for h in horizons:
        mine = sorted((u for u, x in matrix.units.items() if x.horizon_id == h.id), key=lambda u: code[u])
        cyc = [code[u] for u in mine if u in brackets.cyclic]
        held = [(u, brackets.units[u]) for u in mine if u in brackets.units]
        left = (f"; unit{'s' if len(cyc) > 1 else ''} {', '.join(cyc)} {'are' if len(cyc) > 1 else 'is'} left out "
                "(caught in a matrix cycle)") if cyc else ""
        if not mine:
            out[h.id] = HorizonBracket(None, None, False, reason="no unit is assigned to this horizon")
            continue
        if not held:
            out[h.id] = HorizonBracket(None, None, False, reason="every unit of this horizon is caught in a matrix "
                                                                 "cycle (MATRIX_CYCLE): correct the relations")
            continue
        youngs = [(b.youngest, b.young_from) for _, b in held if b.youngest is not None]
        olds = [(b.oldest, b.old_from) for _, b in held if b.oldest is not None]
        young = max((v for v, _ in youngs), default=None)
        old = min((v for v, _ in olds), default=None)
        yf = tuple(sorted({u for v, f in youngs if v == young for u in f}, key=lambda u: code.get(u, str(u))))
        of = tuple(sorted({u for v, f in olds if v == old for u in f}, key=lambda u: code.get(u, str(u))))
        dated = any(b.dated for _, b in held)
        if young is None and old is None:
            out[h.id] = HorizonBracket(None, None, False, reason="no dated unit lies in, above or below it" + left)
        elif young is not None and old is not None and young > old:
            out[h.id] = HorizonBracket(None, None, dated, yf, of, reason=(
                f"its units' brackets do not meet (younger than {young:g} ka by one, older than {old:g} ka by "
                f"another): the horizon is not one layer in time, or a date or relation is wrong" + left))
        else:
            out[h.id] = HorizonBracket(young, old, dated, yf, of, reason=left.lstrip("; "))
    return out


def horizon_brackets(brackets: dict[uuid.UUID, Bracket], matrix: Matrix,
                     horizons: list[Horizon]) -> dict[uuid.UUID, Bracket]:
    """Each horizon's bracket from its units' brackets (``horizon_age_brackets``: the horizon taken as one layer;
    units with no bracket are taken as caught in a cycle), as plain ``Bracket`` values."""
    wrapped = Brackets(units=brackets, cyclic={u for u in matrix.units if u not in brackets})
    return {h: Bracket(b.youngest, b.oldest, b.dated, b.young_from, b.old_from)
            for h, b in horizon_age_brackets(wrapped, matrix, horizons).items()}


def date_words(a: AgeDetermination) -> str:
    """A laboratory date as people name it: its lab code, or (with none) its method and age,
    e.g. ``luminescence date 120 +- 8 ka``; never an internal id."""
    return a.lab_code or f"{a.method.replace('_', '-')} date {a.age_ka:g} +- {a.sigma_ka:g} ka"


def _date_label(a: AgeDetermination) -> str:
    return f"date {a.lab_code}" if a.lab_code else date_words(a)


def age_issues(matrix: Matrix, ages: list[AgeDetermination]) -> list[Issue]:
    """Dates that contradict the matrix beyond both two-sigma ranges, and dates on unknown units."""
    out: list[Issue] = []
    known = [a for a in ages if a.unit_id in matrix.group_of]
    for a in ages:
        if a.unit_id not in matrix.group_of:
            out.append(issue("AGE_UNKNOWN_UNIT", "age_determination", a.id, _date_label(a),
                             _date_label(a) + ("" if a.lab_code is None else f" ({a.age_ka:g} +- {a.sigma_ka:g} ka)")
                             + " names a unit that is not recorded", "correct the date's unit", detail=str(a.unit_id)))
    if matrix.below is None:
        return out
    for upper in known:
        for lower in known:
            gu, gl = matrix.group_of[upper.unit_id], matrix.group_of[lower.unit_id]
            if gl in matrix.below[gu] and upper.age_ka - K * upper.sigma_ka > lower.age_ka + K * lower.sigma_ka:
                uu, ul = matrix.units[upper.unit_id], matrix.units[lower.unit_id]
                out.append(issue(
                    "AGE_CONTRADICTION", "age_determination", upper.id,
                    f"{_date_label(upper)} on unit {uu.code}",
                    f"unit {uu.code} is dated {upper.age_ka:g} +- {upper.sigma_ka:g} ka but lies above unit {ul.code}, "
                    f"dated {lower.age_ka:g} +- {lower.sigma_ka:g} ka: the upper date is older beyond both 2-sigma ranges",
                    "check for reworked material in the upper sample, a mislabelled sample, or the relations",
                    value=round(upper.age_ka - lower.age_ka, 4), detail=str(lower.id),
                ))
    return out
