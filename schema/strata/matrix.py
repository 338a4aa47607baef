"""The Harris matrix: relations as observed, same-as units merged, checked, reduced and ordered.

Edges run from the later (upper) unit to the earlier (lower) one: ``A above B``, ``A cuts B`` and ``A fills B``
all say A is later than B (law of superposition; a cut is later than what it cuts; a fill is later than its
cut: rules of the trade, common practice, no source). ``same_as`` merges units into one node before anything
else; ``contemporary`` pairs must not be ordered. The reduced matrix is the transitive reduction of the merged
graph; observed relations it leaves out are reported as corroborating (info), not as errors.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from typing import Iterable

from ..records import Relation, Unit
from .graph import reachability, strongly_connected, topological_order, transitive_reduction
from .issues import Issue, issue

__all__ = ["Matrix", "build_matrix"]

ORDERED = ("above", "cuts", "fills")


@dataclass
class Matrix:
    units: dict[uuid.UUID, Unit]
    group_of: dict[uuid.UUID, uuid.UUID]  # unit -> representative unit of its same-as group
    members: dict[uuid.UUID, list[uuid.UUID]]
    edges: set[tuple[uuid.UUID, uuid.UUID]]  # merged groups, later -> earlier, as observed
    reduced: set[tuple[uuid.UUID, uuid.UUID]] | None  # None while the matrix has a cycle
    order: list[uuid.UUID] | None  # groups from the bottom (earliest) up; None while cyclic
    issues: list[Issue] = field(default_factory=list)
    below: dict[uuid.UUID, set[uuid.UUID]] | None = None  # groups earlier than each group

    def label(self, group: uuid.UUID) -> str:
        return "=".join(sorted(self.units[u].code for u in self.members[group]))

    def is_later(self, a: uuid.UUID, b: uuid.UUID) -> bool:
        """Whether unit a is later (higher) than unit b according to the matrix."""
        if self.below is None:
            return False
        return self.group_of[b] in self.below[self.group_of[a]]


def _merge_same_as(units: dict[uuid.UUID, Unit], relations: list[Relation]) -> dict[uuid.UUID, uuid.UUID]:
    parent = {u: u for u in units}

    def find(u: uuid.UUID) -> uuid.UUID:
        while parent[u] != u:
            parent[u] = parent[parent[u]]
            u = parent[u]
        return u

    for r in relations:
        if r.kind == "same_as":
            a, b = find(r.upper_unit_id), find(r.lower_unit_id)
            if a != b:
                lo, hi = sorted((a, b), key=lambda u: units[u].code)
                parent[hi] = lo
    return {u: find(u) for u in units}


def _rel_label(r: Relation, units: dict[uuid.UUID, Unit]) -> str:
    name = lambda u: units[u].code if u in units else "(a unit not recorded)"  # noqa: E731
    return f"{name(r.upper_unit_id)} {r.kind.replace('_', ' ')} {name(r.lower_unit_id)}"


def build_matrix(units: Iterable[Unit], relations: Iterable[Relation]) -> Matrix:
    """Merge, check and reduce the matrix of one site; every problem becomes an issue, never an exception.
    Voided relations are left out (they are kept, and exported as voided, but no longer observed)."""
    units_by_id = {u.id: u for u in units}
    rels: list[Relation] = []
    issues: list[Issue] = []
    for r in relations:
        if r.voided:
            continue
        missing = [u for u in (r.upper_unit_id, r.lower_unit_id) if u not in units_by_id]
        if missing:
            issues.append(issue(
                "MATRIX_UNKNOWN_UNIT", "relation", r.id, f"relation {_rel_label(r, units_by_id)}",
                f"relation {_rel_label(r, units_by_id)} names a unit that is not recorded at this site",
                "record that unit (or sync the tablet that recorded it), or void the relation with a reason",
                detail=str(missing[0]),
            ))
            continue
        rels.append(r)
    group_of = _merge_same_as(units_by_id, rels)
    members: dict[uuid.UUID, list[uuid.UUID]] = {}
    for u, g in group_of.items():
        members.setdefault(g, []).append(u)
    m = Matrix(units_by_id, group_of, members, set(), None, None, issues)
    edge_relations: dict[tuple[uuid.UUID, uuid.UUID], list[Relation]] = {}
    for r in rels:
        issues.extend(_kind_checks(r, units_by_id))
        if r.kind not in ORDERED:
            continue
        a, b = group_of[r.upper_unit_id], group_of[r.lower_unit_id]
        if a == b:
            issues.append(issue(
                "MATRIX_SELF", "relation", r.id, f"relation {_rel_label(r, units_by_id)}",
                f"relation {_rel_label(r, units_by_id)} orders a unit against itself: "
                f"{m.label(a)} are recorded as the same unit",
                "correct the relation or the same-as record; one of them is wrong",
            ))
            continue
        m.edges.add((a, b))
        edge_relations.setdefault((a, b), []).append(r)
    _cycles_and_reduction(m, edge_relations)
    _contemporary(m, rels)
    return m


def _kind_checks(r: Relation, units: dict[uuid.UUID, Unit]) -> list[Issue]:
    out = []
    upper, lower = units[r.upper_unit_id], units[r.lower_unit_id]
    if r.kind == "fills" and lower.kind != "cut":
        out.append(issue(
            "MATRIX_FILL_NOT_CUT", "relation", r.id, f"relation {_rel_label(r, units)}",
            f"unit {upper.code} fills unit {lower.code}, which is a {lower.kind}, not a cut",
            f"record the cut that {upper.code} fills, or change the relation to 'above'", value=lower.kind,
        ))
    if r.kind == "cuts" and upper.kind != "cut":
        out.append(issue(
            "MATRIX_CUT_NOT_CUT", "relation", r.id, f"relation {_rel_label(r, units)}",
            f"unit {upper.code} cuts unit {lower.code}, but {upper.code} is a {upper.kind}, not a cut",
            f"record the cut as its own unit, or change {upper.code}'s kind to cut", value=upper.kind,
        ))
    return out


def _cycles_and_reduction(m: Matrix, edge_relations: dict[tuple[uuid.UUID, uuid.UUID], list[Relation]]) -> None:
    cyclic = [c for c in strongly_connected(m.members, m.edges) if len(c) > 1]
    for comp in cyclic:
        labels = sorted(m.label(g) for g in comp)
        rel_ids = sorted(str(r.id) for (a, b), rs in edge_relations.items() if a in comp and b in comp for r in rs)
        m.issues.append(issue(
            "MATRIX_CYCLE", "unit", min(comp, key=m.label), "units " + ", ".join(labels),
            f"units {', '.join(labels)} go round in a circle: each is recorded both above and below another",
            "check the relations between these units on site and void the wrong one with a reason "
            "(Units screen: choose the unit, then Void beside the relation; at camp: the unit's page (its name "
            "on Checks or Matrix), Relations, Void)",
            value=len(comp), detail=",".join(rel_ids),
        ))
        for (a, b), rs in edge_relations.items():
            for r in rs:
                if r.kind == "fills" and a in comp and b in comp:
                    m.issues.append(issue(
                        "MATRIX_FILL_BEFORE_CUT", "relation", r.id, f"relation {_rel_label(r, m.units)}",
                        f"fill {m.label(a)} is placed below its own cut {m.label(b)} by other relations",
                        "a fill is later than its cut: correct the relations that put the cut above it",
                    ))
    if cyclic:
        return
    m.reduced = transitive_reduction(m.members, m.edges)
    m.order = list(reversed(topological_order(m.members, m.edges)))
    m.below = reachability(m.members, m.edges)
    for edge in sorted(m.edges - m.reduced, key=lambda e: (m.label(e[0]), m.label(e[1]))):
        for r in edge_relations[edge]:
            m.issues.append(issue(
                "MATRIX_REDUNDANT", "relation", r.id, f"relation {m.label(edge[0])} over {m.label(edge[1])}",
                f"{m.label(edge[0])} over {m.label(edge[1])} is also implied through other relations "
                "(corroborating, not wrong)", "nothing to fix; it is left out of the reduced matrix",
            ))


def _contemporary(m: Matrix, rels: list[Relation]) -> None:
    if m.below is None:
        return
    for r in rels:
        a, b = m.group_of[r.upper_unit_id], m.group_of[r.lower_unit_id]
        if r.kind == "contemporary" and a != b and (b in m.below[a] or a in m.below[b]):
            later, earlier = (a, b) if b in m.below[a] else (b, a)
            m.issues.append(issue(
                "MATRIX_ORDERED_AND_CONTEMPORARY", "relation", r.id, f"relation {_rel_label(r, m.units)}",
                f"{m.label(a)} and {m.label(b)} are recorded contemporary, but the matrix puts "
                f"{m.label(later)} above {m.label(earlier)}",
                "drop the contemporary record or correct the relations that order them",
            ))
