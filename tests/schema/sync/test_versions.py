"""The version's canonical JSON (what batch hashes are made of) is exactly the reference JSON form."""

from __future__ import annotations

import json
import uuid

from hypothesis import given, settings
from hypothesis import strategies as st

from schema.sync import Version

json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-2**63, 2**63) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=5), inner, max_size=3),
    max_leaves=8,
)


names = st.text(st.characters(exclude_categories=("Cc", "Cs")), min_size=1, max_size=12)  # what Version admits


@settings(max_examples=400, deadline=None)
@given(value=json_values, field=names, parents=st.lists(names, max_size=3),
       seq=st.integers(1, 2**40), wall=st.integers(0, 2**45), counter=st.integers(0, 2**20))
def test_canonical_is_the_sorted_compact_json_of_the_model(value, field, parents, seq, wall, counter) -> None:  # type: ignore[no-untyped-def]
    device = uuid.uuid4()
    v = Version(id=f"{device}:{seq}", record="find", record_id=uuid.uuid4(), field=field, value=value, wall_ms=wall,
                counter=counter, device=device, seq=seq, parents=tuple(parents))
    reference = json.dumps(v.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    assert v.canonical() == reference
    assert json.loads(v.canonical())["value"] == json.loads(reference)["value"]


def test_names_with_control_characters_and_integral_floats() -> None:
    import pytest
    from pydantic import ValidationError

    base = dict(id=f"{uuid.UUID(int=1)}:1", record="find", record_id=uuid.UUID(int=2), field="z", value=1,
                wall_ms=1, counter=0, device=uuid.UUID(int=1), seq=1)
    assert Version.model_validate_json(json.dumps({**base, "record_id": str(base["record_id"]),
                                                   "device": str(base["device"]), "seq": 7.0})).seq == 7
    for bad in ({"field": "z\u0000"}, {"seq": "7"}, {"seq": 7.5}, {"seq": True}, {"record": "x" * 41}):
        with pytest.raises(ValidationError):
            Version.model_validate_json(json.dumps({**base, "record_id": str(base["record_id"]),
                                                    "device": str(base["device"]), **bad}))
