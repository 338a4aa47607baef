"""``schema.wording``: a refused record read as a screen shows it, fields by their form labels and codes by the
pickers' words, taken from the record models and schema/vocab (issue 18, item 11)."""

from __future__ import annotations

import uuid

import pytest

from schema.demo_site import build_site
from schema.errors import RecordInvalid, RecordNotFound
from schema.records import Find, Relation
from schema.validation import check
from schema.wording import error_words, in_words
from tests.helpers import find_data


def test_a_voided_relation_without_reason_names_the_field_by_its_label() -> None:
    a, b = uuid.uuid4(), uuid.uuid4()
    with pytest.raises(RecordInvalid) as exc:
        check(Relation, {"site_id": uuid.uuid4(), "upper_unit_id": a, "lower_unit_id": b, "kind": "same_as",
                         "voided": True})
    assert "void_reason: a voided relation has no void_reason" in str(exc.value)  # the record's own text
    assert error_words(exc.value) == ("relation refused, nothing was saved. Void reason: a voided relation has no "
                                      "void reason. Fix: say why it was voided")


def test_a_sample_material_is_suggested_in_the_pickers_words() -> None:
    with pytest.raises(RecordInvalid) as exc:
        check(Find, find_data(build_site(), number=7, category="sample", material="obsidian"))
    shown = error_words(exc.value)
    assert "Material: material 'obsidian' is not in the vocabulary for category 'sample'. Fix: use one of: " \
           "sediment, tephra, charcoal, bone, shell, tooth enamel, soil block, other" in shown


def test_only_names_the_models_and_vocabularies_hold_are_rewritten() -> None:
    assert in_words("set position_source to total_station; bulk_flotation; unit_id") == \
        "set position source to total station; bulk flotation; unit"
    assert in_words("lab code VLM_RC_11, file my_notes.csv, MATRIX_CYCLE") == \
        "lab code VLM_RC_11, file my_notes.csv, MATRIX_CYCLE"
    assert error_words(RecordNotFound("no unit 'x_y' here")) == "no unit 'x_y' here"
