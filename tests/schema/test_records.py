"""Record models: bad input is refused naming the field and the fix; good input round-trips."""

from __future__ import annotations

import datetime as dt
import uuid

import pytest
from pydantic import ValidationError
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers import find_data
from schema.demo_site import DemoSite
from schema.errors import RecordInvalid
from schema.records import REGISTRY, Find, Horizon, NumberBlock, Season, Trench, Unit
from schema.validation import check
from schema.vocab import MATERIALS


def refused(model, data, **kw) -> RecordInvalid:  # type: ignore[no-untyped-def]
    with pytest.raises(RecordInvalid) as exc:
        check(model, data, **kw)
    return exc.value


def test_valid_find_passes(demo_site: DemoSite) -> None:
    find = check(Find, find_data(demo_site))
    assert find.material == "obsidian" and isinstance(find.id, uuid.UUID)


@pytest.mark.parametrize(
    ("change", "field", "message"),
    [
        ({"category": "pottery"}, "category",
         "category: input should be 'artifact', 'fossil' or 'sample' (got 'pottery'). Fix: use one of: 'artifact', 'fossil' or 'sample'"),
        ({"z": "99.8"}, "z",
         "z: input should be a valid number (got '99.8'). Fix: give elevation (Z) in metres on the site datum, e.g. 101.254"),
        ({"material": "tooth"}, "material",
         "material: material 'tooth' is not in the vocabulary for category 'artifact'. Fix: use one of: "
         + ", ".join(MATERIALS["artifact"])),
        ({"recorder": "ak"}, "recorder",
         "recorder: string should match pattern '^[A-Z]{2,4}$' (got 'ak'). Fix: give recorder's initials, 2-4 capital letters, e.g. 'AK'"),
        ({"colour": "red"}, "colour",
         "colour: is not a field of this record. Fix: remove it; the fields of this record are: " + ", ".join(Find.model_fields)),
        ({"z": None}, "z", "z: only some of e, n, z are given. Fix: give all three, or none for an unplotted find"),
        ({"e": None, "n": None, "z": None}, "e",
         "e: position_source is 'total_station' but e, n, z are missing. Fix: add the coordinates or set position_source to 'none'"),
        ({"voided": True}, "void_reason", "void_reason: a voided find has no void_reason. Fix: say why it was voided"),
        ({"taxon": "Bovidae"}, "taxon",
         "taxon: taxon and element are for fossils but this find is of category 'artifact'. Fix: clear them or change the category"),
        ({"found_at": dt.datetime(2026, 7, 3, 9, 30)}, "found_at",
         "found_at: input should have timezone info (got datetime.datetime(2026, 7, 3, 9, 30)). "
         "Fix: give date and time with a time zone (ISO 8601), e.g. '2026-07-14T09:31:00+03:00'"),
        ({"bearing_deg": 360.0}, "bearing_deg",
         "bearing_deg: input should be less than 360 (got 360.0). Fix: give bearing of the long axis, grid degrees"),
    ],
)
def test_bad_find_names_field_and_fix(demo_site: DemoSite, change: dict, field: str, message: str) -> None:
    err = refused(Find, find_data(demo_site, **change))
    assert err.fields == [field]
    assert str(err) == f"find refused, nothing was saved. {message}"


def test_number_must_lie_in_a_block(demo_site: DemoSite) -> None:
    issued = dt.datetime(2026, 6, 1, tzinfo=dt.timezone.utc)
    blocks = [NumberBlock(device_id=uuid.uuid4(), first=1, last=50, issued_at=issued),
              NumberBlock(device_id=uuid.uuid4(), first=201, last=250, issued_at=issued)]
    check(Find, find_data(demo_site, number=220), context={"number_blocks": blocks})
    err = refused(Find, find_data(demo_site, number=120), context={"number_blocks": blocks})
    assert err.problems[0].field == "number"
    assert err.problems[0].message == "find number 120 is outside this device's number blocks (1-50, 201-250)"


def test_unit_munsell_and_condition(demo_site: DemoSite) -> None:
    base = demo_site.units["101"].model_dump(exclude={"id"})
    assert check(Unit, {**base, "munsell": "10yr 6/4"}).munsell == "10YR 6/4"
    err = refused(Unit, {**base, "munsell": "10YR 5-3"})
    assert err.fields == ["munsell"]
    err = refused(Unit, {**base, "munsell_condition": None})
    assert str(err.problems[0]) == (
        "munsell_condition: a Munsell colour is given without its condition. Fix: say whether it was read moist or dry"
    )


@pytest.mark.parametrize(
    ("model", "field", "change"),
    [
        (Season, "ends_on", {"ends_on": dt.date(2026, 6, 1)}),
        (Trench, "outline", {"outline": [(0.0, 0.0), (1.0, 1.0), (2.0, 2.0)]}),
        (Horizon, "age_min_ka", {"age_min_ka": 500.0, "age_max_ka": 100.0}),
        (Unit, "closed_on", {"status": "closed"}),
    ],
)
def test_cross_field_rules_name_their_field(demo_site: DemoSite, model, field, change) -> None:  # type: ignore[no-untyped-def]
    source = {
        Season: demo_site.season, Trench: demo_site.trenches["TR1"], Horizon: demo_site.horizons["H1"],
        Unit: demo_site.units["101"],
    }[model]
    err = refused(model, {**source.model_dump(exclude={"id"}), **change})
    assert err.fields == [field]


def test_every_record_has_a_family() -> None:
    for name, spec in REGISTRY.items():
        assert spec.model.record_name == name
        assert set(spec.update.model_fields) == set(spec.base.model_fields)
        assert all(not f.is_required() for f in spec.update.model_fields.values())
        assert "id" in spec.create.model_fields and not spec.create.model_fields["id"].is_required()


def test_update_model_keeps_field_checks() -> None:
    update = REGISTRY["unit"].update
    assert update.model_validate({"code": "105"}).code == "105"
    with pytest.raises(ValidationError, match="is not Munsell notation"):
        update.model_validate({"munsell": "blue"})


def test_device_public_hides_token_hash() -> None:
    assert "token_hash" in REGISTRY["device"].model.model_fields
    assert "token_hash" not in REGISTRY["device"].public.model_fields


finds = st.builds(
    dict,
    number=st.integers(1, 10**6),
    category=st.sampled_from(["artifact", "fossil"]),
    count=st.integers(1, 50),
    weight_g=st.none() | st.floats(0.01, 1e5),
    z=st.floats(-500, 5000, allow_nan=False),
    notes=st.text(max_size=50),
    found_at=st.datetimes(dt.datetime(1990, 1, 1), dt.datetime(2090, 1, 1), timezones=st.just(dt.timezone.utc)),
)


@settings(max_examples=60)
@given(finds)
def test_json_round_trip(changes: dict) -> None:
    from schema.demo_site import build_site

    demo = build_site()
    material = "obsidian" if changes["category"] == "artifact" else "bone"
    find = check(Find, find_data(demo, material=material, **changes))
    assert Find.model_validate_json(find.model_dump_json()) == find


def test_every_safety_kind_has_a_label() -> None:
    from typing import get_args

    from schema.records.safety import KIND_LABELS, SAFETY_KINDS, SafetyKind

    assert list(KIND_LABELS) == list(SAFETY_KINDS) == list(get_args(SafetyKind))
    assert all(label and label == label.lower() for label in KIND_LABELS.values())
