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
