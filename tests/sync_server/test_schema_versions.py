"""Late and old tablets: old shapes are upgraded on arrival, newer ones are kept, nothing is dropped for its age."""

from __future__ import annotations

import uuid

import pytest
from fastapi.testclient import TestClient

from mobile import outbox
from mobile.sync import SyncClient
from schema.records import Find
from schema.sync import Version, batch_hash
from schema.sync import upgrade as upgrade_mod
from schema.sync.tables import field_version, pending_row
from tests.helpers import enrolled_tablet, find_data


def test_upgrade_walks_every_step_and_passes_newer_versions() -> None:
    v = Version(id=f"{uuid.UUID(int=1)}:1", record="find", record_id=uuid.UUID(int=2), field="weight_kg", value=0.5,
                wall_ms=1, counter=0, device=uuid.UUID(int=1), seq=1, schema_version=1)

    def kg_to_g(x: Version) -> Version:  # a test-only shape change: schema 1 kept weights in kg
        if x.field != "weight_kg":
            return x.model_copy(update={"schema_version": 2})
        return x.model_copy(update={"field": "weight_g", "value": x.value * 1000, "schema_version": 2})

    (up,) = upgrade_mod.upgrade([v], steps={1: kg_to_g}, current=3)  # step 2 -> 3 changed nothing
    assert (up.field, up.value, up.schema_version, up.id, up.parents) == ("weight_g", 500.0, 3, v.id, ())
    newer = v.model_copy(update={"schema_version": 9})
    assert upgrade_mod.upgrade([newer], steps={1: kg_to_g}, current=3) == [newer]
    with pytest.raises(ValueError, match="keep id and parents"):
        upgrade_mod.upgrade([v], steps={1: lambda x: x.model_copy(update={"id": "other:1", "schema_version": 2})},
                            current=2)


def _push(http: TestClient, token: str, batch: int, versions: list[Version]) -> dict:  # type: ignore[type-arg]
    r = http.post("/v1/sync/push", headers={"Authorization": f"Bearer {token}"},
                  json={"batch": batch, "hash": batch_hash(versions), "versions": [v.model_dump(mode="json") for v in versions]})
    assert r.status_code == 200, r.text
    return r.json()


def test_an_old_tablets_push_is_read_in_todays_shapes(camp, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    tablet, _device, token = enrolled_tablet(server, tmp / "old.sqlite", "TAB-OLD")
    SyncClient(tablet, http, token).sync()  # site set-up and number block
    saved = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), weight_g=12.5))
    outbox.cut_batches(tablet)
    (number,) = outbox.unacked_batches(tablet)
    # what an old Baulk (schema 1, weights in kg) would have sent for the same find
    sent = [v.model_copy(update={"field": "weight_kg", "value": 0.0125}) if v.field == "weight_g" else v
            for v in outbox.batch_versions(tablet, number)]

    def kg_to_g(x: Version) -> Version:
        if x.field != "weight_kg":
            return x.model_copy(update={"schema_version": 2})
        return x.model_copy(update={"field": "weight_g", "value": round(x.value * 1000, 6), "schema_version": 2})

    monkeypatch.setattr(upgrade_mod, "STEPS", {1: kg_to_g})
    monkeypatch.setattr(upgrade_mod, "SCHEMA_VERSION", 2)
    ack = _push(http, token, number, sent)
    assert ack["applied"] == len(sent) and ack["pending_rows"] == 0
    assert server.get(Find, saved.id).weight_g == 12.5
    with server.read() as conn:
        kept = conn.execute(field_version.select().where(field_version.c.record_id == saved.id)).all()
    assert {r.schema_version for r in kept} == {2} and "weight_kg" not in {r.field for r in kept}


def test_a_newer_tablets_versions_are_kept_and_travel_on(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    tablet, _device, token = enrolled_tablet(server, tmp / "new.sqlite", "TAB-NEW")
    SyncClient(tablet, http, token).sync()
    a = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    b = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    outbox.cut_batches(tablet)
    (number,) = outbox.unacked_batches(tablet)
    base = outbox.batch_versions(tablet, number)
    last = max(v.seq for v in base)
    dev = base[0].device

    def newer(seq: int, rid: uuid.UUID, field: str, value: object) -> Version:
        return Version(id=f"{dev}:{seq}", record="find", record_id=rid, field=field, value=value, wall_ms=base[-1].wall_ms + seq,
                       counter=0, device=dev, seq=seq, schema_version=7)

    # a field this server does not know, and a category value it cannot read
    extra = [newer(last + 1, a.id, "shoring_check", "benched at 1.2 m"), newer(last + 2, b.id, "category", "ecofact")]
    sent = [v for v in base if not (v.record_id == b.id and v.field == "category")] + extra
    ack = _push(http, token, number, sent)
    assert ack["applied"] == len(sent) and ack["ignored"] == 0
    assert server.get(Find, a.id).number == a.number  # shown, without the field it does not know
    with server.read() as conn:
        (reason,) = conn.execute(pending_row.select().where(pending_row.c.record_id == b.id)).all()
    assert "cannot read (schema 7, this Baulk reads 1): update Baulk here" in reason.reason
    # both newer versions are served to the next tablet as they came
    other, _d, other_token = enrolled_tablet(server, tmp / "other.sqlite", "TAB-2")
    SyncClient(other, http, other_token).sync()
    with other.read() as conn:
        got = {r.id: r.schema_version for r in conn.execute(field_version.select().where(field_version.c.schema_version == 7))}
    assert got == {v.id: 7 for v in extra}
