"""Pending rows: they cost nothing until what they wait for arrives, they resolve when it does, and the manager
sees each with a reason that says what is wrong, which field, who sent it and the fix.

Unindexed, 20,001 pending rows of an unknown record type made every later push of every tablet re-read them all
(4.4 s instead of 0.01 s); a pushed ``unit_id: "abc"`` was reported as "a value this Baulk cannot read ... update
Baulk here". Push time itself is measured by ``baulk bench sync.pending``; here the work is counted exactly, as
the SQL statements a sync sends about pending rows.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import uuid
from typing import Any, Iterator

import sqlalchemy as sa
from sqlalchemy import event

from mobile import outbox
from schema.records import Find, Spit, Unit
from schema.sync import Version, batch_hash, version_id
from schema.sync.tables import pending_row
from tests.helpers import find_data, synced_tablet


def _push(http: Any, headers: dict[str, str], batch: int, versions: list[Version]) -> dict[str, Any]:
    r = http.post("/v1/sync/push", headers=headers, json={
        "batch": batch, "hash": batch_hash(versions), "versions": [v.model_dump(mode="json") for v in versions]})
    assert r.status_code == 200, r.text
    return r.json()


def _pending(http: Any, manager: dict[str, str]) -> list[tuple[str, str, str, str | None]]:
    r = http.get("/v1/pending", headers=manager)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["count"] == len(body["data"])
    return [(p["record"], p["record_id"], p["reason"], p["waits_for"]) for p in body["data"]]


def _manager(server: Any) -> dict[str, str]:
    return {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}


def _own(tablet: Any) -> list[Version]:
    outbox.cut_batches(tablet)
    return [v for n in outbox.unacked_batches(tablet) for v in outbox.batch_versions(tablet, n)]


def test_rows_waiting_for_a_parent_resolve_when_it_arrives_and_not_before(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    unit = t1.add(Unit(site_id=demo.site.id, trench_id=demo.trenches["TR1"].id, code="150", kind="deposit",
                       description="ash lens", opened_on=demo.season.starts_on, recorder="AK"))
    spit = t1.add(Spit(unit_id=unit.id, number=1, top_z=99.9, bottom_z=99.8, area_m2=1.0))
    find = t1.save_find(find=find_data(demo, number=t1.next_find_number(), unit_id=unit.id, spit_id=spit.id))
    versions = _own(t1)
    by_record = {name: [v for v in versions if v.record == name] for name in ("find", "spit", "unit")}
    manager = _manager(server)
    # the find first, then its spit, then the unit both stand in (a delivery order the server must survive)
    _push(http, c1.headers, 101, by_record["find"])
    assert _pending(http, manager) == [
        ("find", str(find.id), f"waiting for unit {unit.id} (its unit_id), which has not arrived here yet", f"unit:{unit.id}")]
    _push(http, c1.headers, 102, by_record["spit"])
    assert sorted(_pending(http, manager)) == sorted([
        ("find", str(find.id), f"waiting for unit {unit.id} (its unit_id), which has not arrived here yet", f"unit:{unit.id}"),
        ("spit", str(spit.id), f"waiting for unit {unit.id} (its unit_id), which has not arrived here yet", f"unit:{unit.id}")])
    assert server.list(Find, id=find.id) == [] and server.list(Spit, id=spit.id) == []
    ack = _push(http, c1.headers, 103, by_record["unit"])
    assert ack["pending_rows"] == 0 and ack["rows_written"] == 3  # the unit, then the spit and the find it unblocked
    assert _pending(http, manager) == []
    assert server.get(Find, find.id) == find and server.get(Spit, spit.id) == spit and server.get(Unit, unit.id) == unit


@contextlib.contextmanager
def _statements_about_pending_rows(server: Any) -> Iterator[list[str]]:
    seen: list[str] = []

    def count(_conn: Any, _cursor: Any, statement: str, *_args: Any) -> None:
        if "pending_row" in statement:
            seen.append(statement)

    event.listen(server.engine, "before_cursor_execute", count)
    try:
        yield seen
    finally:
        event.remove(server.engine, "before_cursor_execute", count)


def _newer_records(device: uuid.UUID, n: int, *, first_seq: int, record: str = "soil_profile",
                   schema_version: int = 2) -> list[Version]:
    """``n`` records of a type this Baulk does not know, one version each, as a newer tablet would send them."""
    return [Version(id=version_id(device, first_seq + k), record=record, record_id=uuid.UUID(int=10_000 + first_seq + k),
                    field="depth_m", value=1.5, wall_ms=1_700_000_000_000 + k, counter=0, device=device,
                    seq=first_seq + k, schema_version=schema_version) for k in range(n)]


def test_a_sync_does_the_same_work_with_or_without_unrelated_pending_rows(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")

    def one_find_synced() -> list[str]:
        t1.save_find(find=find_data(demo, number=t1.next_find_number()))
        with _statements_about_pending_rows(server) as seen:
            assert c1.sync().acks[0]["applied"] > 0
        return seen

    quiet = one_find_synced()
    assert quiet  # a push does look at pending rows: those its new rows unblock
    ack = _push(http, c2.headers, 1, _newer_records(t2.device_id(), 300, first_seq=1))
    assert ack["pending_rows"] == 300
    assert one_find_synced() == quiet  # 300 unrelated pending rows: not one statement more

    # rows an older Baulk kept without saying what they wait for are tried once, and then wait like the others
    with server.atomic() as conn:
        conn.execute(pending_row.update().values(waits_for=None))
    assert len(one_find_synced()) == len(quiet) + 300  # each of them written once more, with its wait
    with server.read() as conn:
        assert set(conn.execute(sa.select(pending_row.c.waits_for)).scalars()) == {"schema:2"}
    assert one_find_synced() == quiet


def test_the_manager_sees_what_is_wrong_which_field_and_who_sent_it(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    a = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    b = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    changed = {(a.id, "unit_id"): {"value": "abc"},  # invalid, from a tablet of this schema
               (c.id, "category"): {"value": "ecofact", "schema_version": 7}}  # a newer Baulk's vocabulary
    sent = [v.model_copy(update=changed[(v.record_id, v.field)]) if (v.record_id, v.field) in changed else v
            for v in _own(t1)]
    last = max(v.seq for v in sent)  # and a 5,000-character note on b (an empty note is the default: not sent)
    sent.append(Version(id=version_id(t1.device_id(), last + 1), record="find", record_id=b.id, field="notes",
                        value="x" * 5000, wall_ms=sent[-1].wall_ms + 1, counter=0, device=t1.device_id(), seq=last + 1))
    ack = _push(http, c1.headers, 1, sent)
    assert ack["applied"] == len(sent) and ack["pending_rows"] == 3
    _push(http, c2.headers, 1, _newer_records(t2.device_id(), 1, first_seq=1))
    _push(http, c2.headers, 2, _newer_records(t2.device_id(), 1, first_seq=2, record="zzz", schema_version=1))
    assert sorted(_pending(http, _manager(server))) == sorted([
        ("find", str(a.id), (
            f"find {a.id} is not shown: unit_id sent by TAB-1 is invalid: input should be a valid UUID, invalid length: "
            "found 3 (got 'abc'). It is kept here until a valid value arrives. Fix: choose the unit again (the value "
            "must be the id of a unit), on TAB-1, and sync again."), "edit"),
        ("find", str(b.id), (
            f"find {b.id} is not shown: notes sent by TAB-1 is invalid: string should have at most 4000 characters "
            f"(got '{'x' * 56}..., 5000 characters). It is kept here until a valid value arrives. Fix: shorten it to "
            "at most 4000 characters, on TAB-1, and sync again."), "edit"),
        ("find", str(c.id), (
            "a value this Baulk cannot read (schema 7, this Baulk reads 1): update Baulk here; category: input should "
            "be 'artifact', 'fossil' or 'sample' (got 'ecofact')"), "schema:7"),
        ("soil_profile", str(uuid.UUID(int=10_001)),
         "record type 'soil_profile' (sent by TAB-2, written in schema 2) is unknown to this Baulk (schema 1): update "
         "Baulk here", "schema:2"),
        ("zzz", str(uuid.UUID(int=10_002)), (
            "record type 'zzz' sent by TAB-2 is not a Baulk record type: its versions say schema 1, which this Baulk "
            "reads, and that schema has no such record. Its versions are kept but never shown; ask whoever uses "
            "TAB-2 which program wrote them."), "schema:2"),
    ])
    # only a manager sees them
    r = http.get("/v1/pending", headers=c1.headers)
    assert r.status_code == 403 and r.json()["code"] == "Forbidden"
    # a valid value from the tablet (an edit of the one it saw) shows the find
    fix = Version(id=version_id(t1.device_id(), 900), record="find", record_id=a.id, field="unit_id",
                  value=str(demo.units["101"].id), wall_ms=int(dt.datetime.now().timestamp() * 1000), counter=0,
                  device=t1.device_id(), seq=900, parents=(next(v.id for v in sent if (v.record_id, v.field) == (a.id, "unit_id")),))
    assert _push(http, c1.headers, 2, [fix])["pending_rows"] == 4
    assert server.get(Find, a.id).unit_id == demo.units["101"].id
