"""Voiding a wrong relation on the Units screen of a real window, by touches (issue 18, item 12): a relation
that closes a circle is added, the check's fix points at Void; Void with no reason is refused in words; with a
reason the relation is voided (kept, struck through and listed as VOIDED with Restore instead of Void) and the
circle is gone; Restore with a reason puts it back and the circle is reported again.
Screenshots: units-relation-cycle.png, units-relation-voided.png and units-relation-restored.png."""

from __future__ import annotations

import pytest

from schema.records import Relation
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui


def test_a_wrong_relation_is_voided_by_touch(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    units = d.nav("units")
    d.choose(units.ids.chosen, "103")
    assert len(units.void_buttons) == 2  # the demo's 102 above 103 and 103 above 104, each with its Void
    d.choose(units.ids.upper, "103")
    d.choose(units.ids.kind, "above")
    d.choose(units.ids.lower, "101")  # 101 is above 102, above 103: this closes a circle
    d.tap(units.ids.relate)
    assert units.problem == "", units.problem
    assert "ERROR MATRIX_CYCLE: units 101, 102=204=302, 103 go round in a circle" in units.relation_note
    assert "void the wrong one with a reason (Units screen: choose the unit, then Void beside the relation; " \
        in units.relation_note
    (wrong,) = tablet.list(Relation, upper_unit_id=_unit_id(tablet, "103"), lower_unit_id=_unit_id(tablet, "101"))
    d.screenshot(shots, "units-relation-cycle")
    button = units.void_buttons[str(wrong.id)]
    d.tap(button)  # no reason typed yet
    assert units.problem == ("PROBLEM: void of the relation refused, nothing was saved. Reason: voiding a relation "
                             "needs a reason. Fix: say why the relation is wrong, e.g. 'recorded the wrong way round'")
    assert not tablet.get(Relation, wrong.id).voided
    d.type(units.ids.relation_void_reason, "misread the section: 103 lies under 101")
    d.tap(units.void_buttons[str(wrong.id)])
    assert units.problem == "", units.problem
    kept = tablet.get(Relation, wrong.id)
    assert (kept.voided, kept.void_reason) == (True, "misread the section: 103 lies under 101")
    assert units.relation_note.startswith("Relation 103 above 101 voided (misread the section: 103 lies under 101); "
                                          "it no longer counts in the matrix.")
    assert "MATRIX_CYCLE" not in units.relation_note
    rows = [w.text for row in units.ids.relation_rows.children for w in row.children if hasattr(w, "text")]
    assert "[s]103 above 101[/s] VOIDED: misread the section: 103 lies under 101" in rows  # struck through
    assert str(wrong.id) not in units.void_buttons and len(units.void_buttons) == 2
    assert list(units.restore_buttons) == [str(wrong.id)]
    assert units.ids.relation_void_reason.text == ""
    d.screenshot(shots, "units-relation-voided")
    # restored by touch, with a reason: the relation counts again and the circle is back
    d.tap(units.restore_buttons[str(wrong.id)])
    assert units.problem == ("PROBLEM: restore of the relation refused, nothing was saved. Reason: restoring a "
                             "relation needs a reason. Fix: say why the relation was right after all, e.g. 'the "
                             "section drawing confirms it'")
    assert tablet.get(Relation, wrong.id).voided
    d.type(units.ids.relation_void_reason, "re-read the drawing")
    d.tap(units.restore_buttons[str(wrong.id)])
    assert units.problem == "", units.problem
    kept = tablet.get(Relation, wrong.id)
    assert (kept.voided, kept.void_reason) == (False, "restored (AK): re-read the drawing")
    assert units.relation_note.startswith("Relation 103 above 101 restored; it counts in the matrix again.\n"
                                          "ERROR MATRIX_CYCLE: units 101, 102=204=302, 103 go round in a circle")
    assert str(wrong.id) in units.void_buttons and not units.restore_buttons
    d.screenshot(shots, "units-relation-restored")


def _unit_id(store, code: str):  # type: ignore[no-untyped-def]
    from schema.records import Unit

    return store.list(Unit, code=code)[0].id
