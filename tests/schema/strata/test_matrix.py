"""Harris matrix checks on small hand-made cases (rules of the trade: law of superposition, a cut is later than
what it cuts, a fill is later than its cut; common practice, no source)."""

from __future__ import annotations

import datetime as dt
import uuid

from schema.records import Relation, Unit
from schema.strata.matrix import build_matrix

SITE, TRENCH = uuid.UUID(int=1), uuid.UUID(int=2)


def units(*specs: str) -> dict[str, Unit]:
    out = {}
    for spec in specs:
        code, _, kind = spec.partition(":")
        out[code] = Unit(site_id=SITE, trench_id=TRENCH, code=code, kind=kind or "deposit",  # type: ignore[arg-type]
                         opened_on=dt.date(2026, 7, 1), recorder="AK")
    return out


def rel(u: dict[str, Unit], upper: str, kind: str, lower: str) -> Relation:
    return Relation(site_id=SITE, upper_unit_id=u[upper].id, lower_unit_id=u[lower].id, kind=kind)  # type: ignore[arg-type]


def codes(m) -> list[str]:  # type: ignore[no-untyped-def]
    return sorted(i.code for i in m.issues)


def test_clean_sequence_orders_bottom_up() -> None:
    u = units("1", "2", "3")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2"), rel(u, "2", "above", "3")])
    assert codes(m) == []
    assert [m.label(g) for g in m.order or []] == ["3", "2", "1"]
    assert m.is_later(u["1"].id, u["3"].id) and not m.is_later(u["3"].id, u["1"].id)


def test_redundant_relation_is_corroborating_not_wrong() -> None:
    u = units("1", "2", "3")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2"), rel(u, "2", "above", "3"), rel(u, "1", "above", "3")])
    assert codes(m) == ["MATRIX_REDUNDANT"]
    assert m.issues[0].severity == "info"
    assert {(m.label(a), m.label(b)) for a, b in m.reduced or ()} == {("1", "2"), ("2", "3")}


def test_cycle_names_every_unit_on_it() -> None:
    u = units("1", "2", "3", "4")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2"), rel(u, "2", "above", "3"), rel(u, "3", "above", "1"),
                                  rel(u, "3", "above", "4")])
    (cycle,) = m.issues
    assert cycle.code == "MATRIX_CYCLE" and cycle.severity == "error"
    assert cycle.message == "units 1, 2, 3 go round in a circle: each is recorded both above and below another"
    assert m.order is None and m.reduced is None


def test_same_as_merges_before_checking() -> None:
    u = units("101", "204", "205", "103")
    m = build_matrix(u.values(), [rel(u, "101", "same_as", "204"), rel(u, "101", "above", "103"),
                                  rel(u, "204", "above", "205")])
    assert codes(m) == []
    assert sorted(m.label(g) for g in m.members) == ["101=204", "103", "205"]


def test_self_relation_through_same_as() -> None:
    u = units("101", "204")
    m = build_matrix(u.values(), [rel(u, "101", "same_as", "204"), rel(u, "101", "above", "204")])
    assert codes(m) == ["MATRIX_SELF"]
    assert m.issues[0].message == ("relation 101 above 204 orders a unit against itself: 101=204 are recorded as "
                                   "the same unit")


def test_contemporary_but_ordered() -> None:
    u = units("1", "2", "3")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2"), rel(u, "2", "above", "3"), rel(u, "1", "contemporary", "3")])
    assert codes(m) == ["MATRIX_ORDERED_AND_CONTEMPORARY"]


def test_fill_of_a_deposit_and_cut_by_a_deposit() -> None:
    u = units("10:fill", "11", "12")
    m = build_matrix(u.values(), [rel(u, "10", "fills", "11"), rel(u, "11", "cuts", "12")])
    assert codes(m) == ["MATRIX_CUT_NOT_CUT", "MATRIX_FILL_NOT_CUT"]


def test_fill_placed_below_its_cut() -> None:
    u = units("20:fill", "21:cut", "22")
    # 20 fills 21, but someone recorded the cut 21 above a deposit 22 that is above the fill 20
    m = build_matrix(u.values(), [rel(u, "20", "fills", "21"), rel(u, "21", "above", "22"), rel(u, "22", "above", "20")])
    assert codes(m) == ["MATRIX_CYCLE", "MATRIX_FILL_BEFORE_CUT"]


def test_relation_to_an_unknown_unit_is_an_issue_not_a_crash() -> None:
    u = units("1")
    ghost = Relation(site_id=SITE, upper_unit_id=u["1"].id, lower_unit_id=uuid.UUID(int=99), kind="above")
    m = build_matrix(u.values(), [ghost])
    assert codes(m) == ["MATRIX_UNKNOWN_UNIT"]
    assert m.issues[0].message == ("relation 1 above (a unit not recorded) names a unit that is not recorded at "
                                   "this site")  # words, never an internal id (issue 18)
    assert m.issues[0].detail == str(uuid.UUID(int=99))
