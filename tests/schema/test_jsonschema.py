"""JSON Schema files: never stale, and a general-purpose validator agrees with the models.

Outside check: the ``jsonschema`` package (the reference Python implementation of the JSON Schema
specification, draft 2020-12) validates real records against our generated files.
"""

from __future__ import annotations

import json

import jsonschema
import pytest

from tests.helpers import find_data
from schema.demo_site import DemoSite
from schema.jsonschema import JSON_DIR, generate, stale
from schema.records import Find


def test_files_are_up_to_date() -> None:
    assert stale() == [], "run: python -m schema.jsonschema"


def test_stale_file_is_detected(tmp_path) -> None:  # type: ignore[no-untyped-def]
    for name, text in generate().items():
        (tmp_path / name).write_text(text)
    assert stale(tmp_path) == []
    (tmp_path / "find.json").write_text("{}\n")
    (tmp_path / "old_record.json").write_text("{}\n")
    assert stale(tmp_path) == ["find.json", "old_record.json"]


def _validator(name: str) -> jsonschema.Draft202012Validator:
    schema = json.loads((JSON_DIR / name).read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema, format_checker=jsonschema.FormatChecker())


def test_reference_validator_accepts_a_record(demo_site: DemoSite) -> None:
    find = Find.model_validate(find_data(demo_site))
    _validator("find.json").validate(json.loads(find.model_dump_json()))


@pytest.mark.parametrize(
    ("change", "path"),
    [({"category": "pottery"}, "category"), ({"z": "99.8"}, "z"), ({"colour": "red"}, None), ({"count": 0}, "count")],
)
def test_reference_validator_refuses_what_the_model_refuses(demo_site: DemoSite, change: dict, path: str | None) -> None:
    doc = json.loads(Find.model_validate(find_data(demo_site)).model_dump_json())
    doc.update(change)
    errors = list(_validator("find.json").iter_errors(doc))
    assert errors
    if path:
        assert any(list(e.path) == [path] for e in errors)
