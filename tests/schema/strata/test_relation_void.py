"""Voided relations (issue 18, item 12): the record's rule (a void needs a reason), and the matrix leaving voided
relations out. Cycle detection after voiding is checked against networkx (a general-purpose graph library, used
here as the outside reference): the matrix's cycles are networkx's strongly connected components of more than
one unit, computed on the relations that are not voided."""

from __future__ import annotations

import datetime as dt
import uuid

import networkx as nx
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from schema.errors import RecordInvalid
from schema.records import Relation, Unit
from schema.strata.matrix import build_matrix
from schema.validation import check

SITE, TRENCH = uuid.UUID(int=1), uuid.UUID(int=2)
UNITS = [Unit(id=uuid.UUID(int=100 + i), site_id=SITE, trench_id=TRENCH, code=str(100 + i), kind="deposit",
              opened_on=dt.date(2026, 7, 1), recorder="AK") for i in range(12)]


def _relation(a: int, b: int, voided: bool) -> Relation:
    return Relation(site_id=SITE, upper_unit_id=UNITS[a].id, lower_unit_id=UNITS[b].id, kind="above",
                    voided=voided, void_reason="recorded the wrong way round" if voided else None)


def test_a_void_needs_a_reason() -> None:
    data = {"site_id": SITE, "upper_unit_id": UNITS[0].id, "lower_unit_id": UNITS[1].id, "kind": "above",
            "voided": True}
    with pytest.raises(RecordInvalid) as exc:
        check(Relation, data)
    assert exc.value.fields == ["void_reason"]
    assert "a voided relation has no void_reason" in str(exc.value)
    assert check(Relation, {**data, "void_reason": "mixed up 100 and 101"}).voided


def test_voiding_the_wrong_relation_breaks_the_cycle() -> None:
    wrong = _relation(2, 0, voided=False)
    rels = [_relation(0, 1, False), _relation(1, 2, False), wrong]
    cyclic = build_matrix(UNITS[:3], rels)
    assert [i.code for i in cyclic.issues] == ["MATRIX_CYCLE"]
    assert "void the wrong one with a reason (Units screen" in cyclic.issues[0].fix
    fixed = build_matrix(UNITS[:3], [*rels[:2], wrong.model_copy(update={"voided": True, "void_reason": "misread"})])
    assert fixed.issues == []
    assert [fixed.label(g) for g in fixed.order or []] == ["102", "101", "100"]
    assert {(fixed.label(a), fixed.label(b)) for a, b in fixed.reduced or ()} == {("100", "101"), ("101", "102")}


def test_a_voided_relation_raises_no_other_check() -> None:
    """A voided fill of a deposit, a voided same-as and a voided relation to an unknown unit say nothing."""
    fill = Relation(site_id=SITE, upper_unit_id=UNITS[0].id, lower_unit_id=UNITS[1].id, kind="fills",
                    voided=True, void_reason="not a fill")
    same = Relation(site_id=SITE, upper_unit_id=UNITS[0].id, lower_unit_id=UNITS[1].id, kind="same_as",
                    voided=True, void_reason="two units after all")
    unknown = Relation(site_id=SITE, upper_unit_id=UNITS[0].id, lower_unit_id=uuid.UUID(int=999), kind="above",
                       voided=True, void_reason="no such unit")
    m = build_matrix(UNITS[:2], [fill, same, unknown, _relation(1, 0, False)])
    assert m.issues == []
    assert m.group_of[UNITS[0].id] != m.group_of[UNITS[1].id]  # the voided same-as merged nothing


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 11), st.integers(0, 11), st.booleans()), max_size=40))
def test_cycles_after_voiding_match_networkx(pairs: list[tuple[int, int, bool]]) -> None:
    rels = [_relation(a, b, voided) for a, b, voided in pairs if a != b]
    m = build_matrix(UNITS, rels)
    g = nx.DiGraph()  # reference: networkx on the relations in force only
    g.add_nodes_from(u.code for u in UNITS)
    g.add_edges_from((UNITS[a].code, UNITS[b].code) for a, b, voided in pairs if a != b and not voided)
    expected = sorted(sorted(c) for c in nx.strongly_connected_components(g) if len(c) > 1)
    found = sorted(sorted(i.label.removeprefix("units ").split(", ")) for i in m.issues if i.code == "MATRIX_CYCLE")
    assert found == expected
    assert (m.order is None) == (not nx.is_directed_acyclic_graph(g))
    if m.reduced is not None:
        assert {(m.label(a), m.label(b)) for a, b in m.reduced} == set(nx.transitive_reduction(g).edges())
