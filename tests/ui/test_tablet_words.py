"""Words on the tablet (issue 18, item 11), read from a real window driven by touches: a refused sample names
its fields by their labels and offers the sample materials as the picker shows them (``tooth enamel``, never the
stored ``tooth_enamel``); a find voided without a reason names the reason field by its label. The labels and words
come from the record model and schema/vocab (``schema.wording``), so the test compares against those, read here.
Screenshot: record-words.png."""

from __future__ import annotations

import pytest

from schema import vocab
from schema.forms import field_label
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui


def test_a_refused_sample_speaks_in_labels_and_picker_words(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    rec = d.nav("record")
    d.choose(rec.ids.unit, "101")
    d.tap(rec.ids.cat_sample)
    shown = rec.ids.form.inputs["material"].values
    assert "tooth enamel" in shown and "soil block" in shown  # what the picker offers
    d.tap(rec.ids.pos_sieve)
    d.choose(rec.ids.spit, "1")
    d.tap(rec.ids.save)  # no material, no purpose
    problem = rec.problem
    assert problem.startswith("PROBLEM: find refused, nothing was saved. "), problem
    words = ", ".join(vocab.words(m) for m in vocab.materials_for("sample"))
    assert words == "sediment, tephra, charcoal, bone, shell, tooth enamel, soil block, other"
    assert f"{field_label('material')}: is required. Fix: add it: use one of: {words}" in problem, problem
    assert "_" not in problem, problem  # no stored key, no field name reaches the screen
    d.screenshot(shots, "record-words")


def test_refusals_name_what_was_refused_and_a_missing_shot_says_how_to_take_one(tablet, demo_site, run_app,
                                                                               shots) -> None:  # type: ignore[no-untyped-def]
    """Save with the Shot method and no shot: the problem says no position was taken and how to take one (never
    the instrument's output format). Void on Finds with no reason: the problem names the void of that find, not a
    refused find. The Finds count reads "1 find". Screenshots: record-no-shot.png, finds-void-refused.png."""
    from tests.helpers import find_data
    from tests.ui.test_tablet_windows import _set_up_instrument

    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    _set_up_instrument(d)
    rec = d.nav("record")
    d.choose(rec.ids.unit, "101")
    d.tap(rec.ids.pos_shot)
    d.tap(rec.ids.save)  # no shot taken, none typed
    assert rec.problem == ("PROBLEM: find refused, nothing was saved. Shot: no position was taken: there is no shot "
                           "for this find. Fix: tap Take shot, or type the instrument's readings and tap Use (or "
                           "choose GNSS, Tape or Sieve)"), rec.problem
    assert "output format" not in rec.problem
    d.screenshot(shots, "record-no-shot")

    found = d.app.store.save_find(find=find_data(demo_site, number=d.app.store.next_find_number()))
    finds = d.nav("finds")
    d.pump(3)
    assert finds.count == "1 find"
    (row,) = [w for w in finds.ids.rv.layout_manager.children if w.find_id]
    d.tap(row)
    d.tap(finds.ids.void)  # no reason typed
    assert finds.problem == (f"PROBLEM: void of find {found.number} refused, nothing was saved. Reason: a void needs "
                             "a reason. Fix: say why the find is voided"), finds.problem
    d.screenshot(shots, "finds-void-refused")
