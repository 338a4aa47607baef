"""Push and pull between real tablet stores and a server store, through the HTTP app."""

from __future__ import annotations

import uuid

import pytest

from mobile.sync import SyncClient
from schema.errors import SyncError
from schema.records import Find, NumberBlock, Unit
from schema.sync import Version, batch_hash
from sync_server.sync import list_conflicts
from tests.helpers import find_data, number_clash, synced_tablet


def test_first_pull_provisions_a_tablet(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    tablet, _client = synced_tablet(server, http, tmp, "TAB-1")
    assert tablet.count(Unit) == 12 and tablet.get(Unit, demo.units["203"].id) == demo.units["203"]
    (block,) = tablet.list(NumberBlock)
    assert (block.first, block.last) == (1, 100) and tablet.next_find_number() == 1
    other, _ = synced_tablet(server, http, tmp, "TAB-2")
    assert [(b.first, b.last) for b in other.list(NumberBlock)] == [(101, 200)]  # only its own block travels


def test_finds_reach_the_server_and_the_other_tablets(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    for _ in range(3):
        t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    report = c1.sync()
    assert report.pushed_versions > 0 and report.replayed_batches == 0
    assert server.count(Find) == 3
    c2.sync()
    assert sorted(f.number for f in t2.list(Find)) == [1, 2, 3]
    assert c1.pending_count() == 0
    # a new find sends only the fields that differ from the model's defaults; every replica reads the rest
    # as the default, so the three copies are equal field for field
    (first,) = [f for f in t1.list(Find) if f.number == 1]
    assert t2.get(Find, first.id) == server.get(Find, first.id) == first
    from schema.sync.replica import record_versions

    with t1.read() as conn:
        sent = {v.field for v in record_versions(conn, [first.id])}
    assert "notes" not in sent and "voided" not in sent and {"number", "unit_id", "z"} <= sent


def test_concurrent_edits_become_a_conflict_and_a_resolution_travels(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    find = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    c2.sync()
    # both tablets change the same find's unit while offline
    t1.put(t2.get(Find, find.id).model_copy(update={"unit_id": demo.units["102"].id, "z": 99.5}))
    t2.put(t2.get(Find, find.id).model_copy(update={"unit_id": demo.units["103"].id}))
    c1.sync()
    c2.sync()
    c1.sync()
    (conflict,) = list_conflicts(server)
    assert conflict["field"] == "unit_id" and len(conflict["values"]) == 2
    assert {v["device"] for v in conflict["values"]} == {"TAB-1", "TAB-2"}
    # every replica shows the same winner
    assert t1.get(Find, find.id).unit_id == t2.get(Find, find.id).unit_id == server.get(Find, find.id).unit_id
    manager_token = server.add_device(label="MGR", role="manager")[1]
    r = http.post("/v1/conflicts/resolve", headers={"Authorization": f"Bearer {manager_token}"},
                  json={"record": "find", "record_id": str(find.id), "field": "unit_id", "value": str(demo.units["102"].id)})
    assert r.status_code == 200, r.text
    c1.sync()
    c2.sync()
    assert list_conflicts(server) == []
    assert t1.get(Find, find.id).unit_id == t2.get(Find, find.id).unit_id == demo.units["102"].id
    assert t2.get(Find, find.id).z == 99.5  # the other field's edit was never in conflict


def test_a_batch_sent_twice_is_applied_once(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    first = c1._batch(1)  # noqa: SLF001
    token = c1.headers
    body = {"batch": 1, "hash": batch_hash(first), "versions": [v.model_dump(mode="json") for v in first]}
    r = http.post("/v1/sync/push", headers=token, json=body)
    assert r.status_code == 200 and r.json()["replayed"] is True
    assert server.count(Find) == 1
    # the answer says what this request did (nothing) and what the first one did (issue 16)
    ack = r.json()
    assert (ack["applied"], ack["rows_written"], ack["duplicates"], ack["received"]) == (0, 0, len(first), len(first))
    assert ack["original"]["applied"] == len(first) and ack["original"]["rows_written"] == 1


def test_same_batch_different_content_is_refused_with_the_fix(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    versions = c1._batch(1)[:1]  # noqa: SLF001
    body = {"batch": 1, "hash": batch_hash(versions), "versions": [v.model_dump(mode="json") for v in versions]}
    r = http.post("/v1/sync/push", headers=c1.headers, json=body)
    assert r.status_code == 409
    assert "re-enrol it as a new device" in r.json()["message"]


def test_versions_of_another_device_are_refused(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    _t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    forged = Version(id=f"{uuid.UUID(int=9)}:1", record="find", record_id=uuid.uuid4(), field="z", value=1.0,
                     wall_ms=1, counter=0, device=uuid.UUID(int=9), seq=1)
    r = http.post("/v1/sync/push", headers=c1.headers,
                  json={"batch": 9, "hash": batch_hash([forged]), "versions": [forged.model_dump(mode="json")]})
    assert r.status_code == 403 and "a tablet pushes only its own edits" in r.json()["message"]


def test_a_cut_connection_is_a_plain_error_and_the_retry_resends_the_same_batch(camp) -> None:  # type: ignore[no-untyped-def]
    import httpx

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))

    def dead(_request: httpx.Request) -> httpx.Response:
        raise httpx.ConnectError("no route to host")

    offline = SyncClient(t1, httpx.Client(transport=httpx.MockTransport(dead), base_url="http://camp"), "x",
                         retry_wait_s=0)
    with pytest.raises(SyncError, match="the camp server did not answer"):
        offline.sync()
    before = offline.pending_count()
    assert before > 0
    report = c1.sync()
    assert report.pushed_batches == 1 and c1.pending_count() == 0 and server.count(Find) == 1


def test_validation_runs_after_every_merge(camp) -> None:  # type: ignore[no-untyped-def]
    from sync_server.validation import list_issues

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number(), z=99.30))  # below its unit
    c1.sync()
    assert [r["code"] for r in list_issues(server)] == ["POS_BELOW_UNIT"]


def test_a_truncated_push_body_is_refused_and_nothing_applied(camp) -> None:  # type: ignore[no-untyped-def]
    import json

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    from mobile import outbox

    outbox.cut_batches(t1)
    (number,) = outbox.unacked_batches(t1)
    versions = outbox.batch_versions(t1, number)
    raw = json.dumps({"batch": number, "hash": batch_hash(versions),
                      "versions": [v.model_dump(mode="json") for v in versions]}).encode()
    for cut in (len(raw) // 3, len(raw) - 1):
        r = http.post("/v1/sync/push", headers={**c1.headers, "content-type": "application/json"}, content=raw[:cut])
        assert r.status_code == 422 and r.json()["message"].startswith("push body refused at ")
    assert server.count(Find) == 0
    c1.sync()  # the whole batch, sent again intact, is applied once
    assert server.count(Find) == 1


def test_a_number_used_twice_reaches_the_server_as_a_conflict_and_is_renumbered(camp) -> None:  # type: ignore[no-untyped-def]
    from sync_server.validation import list_issues

    server, demo, http, tmp = camp
    (t1, c1), (t2, c2), a, b = number_clash(server, demo, http, tmp)
    c1.sync()
    # both finds are visible everywhere, and the clash is listed for the data manager
    assert server.get(Find, a.id).number == server.get(Find, b.id).number == 1
    assert t1.get(Find, b.id).number == 1
    (clash,) = list_conflicts(server)  # one clash, one conflict (issue 16), though both finds keep it
    assert (clash["kind"], clash["field"], clash["record_id"]) == ("duplicate_number", "number", min(str(a.id), str(b.id)))
    assert sorted(v["record_id"] for v in clash["values"]) == sorted([str(a.id), str(b.id)])
    t1.save_find(find=find_data(demo, number=2))
    assert c1.sync().conflicts_open == 1  # the push answer counts it once too
    assert "NUMBER_DUPLICATE" in {r["code"] for r in list_issues(server)}
    manager_token = server.add_device(label="MGR", role="manager")[1]
    listed = http.get("/v1/conflicts", headers={"Authorization": f"Bearer {manager_token}"}).json()
    assert [c["kind"] for c in listed["data"]] == ["duplicate_number"] and listed["count"] == 1
    r = http.post("/v1/conflicts/resolve", headers={"Authorization": f"Bearer {manager_token}"},
                  json={"record": "find", "record_id": str(b.id), "field": "number", "value": 4001})
    assert r.status_code == 200 and r.json()["still_open"] is None, r.text
    assert list_conflicts(server) == []
    c2.sync()
    assert t2.get(Find, b.id).number == 4001 and t2.get(Find, a.id).number == 1


def test_a_void_against_an_unseen_edit_is_a_conflict_and_a_restore_travels(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    find = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    c2.sync()
    t1.void_find(find_id=find.id, reason="logged twice")  # TAB-1 thinks it is a double entry
    t2.put(t2.get(Find, find.id).model_copy(update={"unit_id": demo.units["102"].id}))  # TAB-2 moves it
    c1.sync()
    c2.sync()
    (conflict,) = list_conflicts(server)
    assert (conflict["kind"], conflict["field"]) == ("void", "voided")
    assert sorted(v["field"] for v in conflict["values"]) == ["unit_id", "voided"]
    manager_token = server.add_device(label="MGR", role="manager")[1]
    r = http.post("/v1/conflicts/resolve", headers={"Authorization": f"Bearer {manager_token}"},
                  json={"record": "find", "record_id": str(find.id), "field": "voided", "value": False})
    assert r.status_code == 200, r.text
    assert list_conflicts(server) == []
    c1.sync()
    c2.sync()
    for replica in (t1, t2, server):
        shown = replica.get(Find, find.id)
        assert shown.voided is False and shown.unit_id == demo.units["102"].id


def test_a_void_made_after_seeing_an_edit_raises_no_conflict(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    find = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    c2.sync()
    t2.put(t2.get(Find, find.id).model_copy(update={"unit_id": demo.units["102"].id}))
    c2.sync()
    c1.sync()
    t1.void_find(find_id=find.id, reason="logged twice")
    c1.sync()
    assert list_conflicts(server) == [] and server.get(Find, find.id).voided is True


def test_a_pull_sends_back_none_of_the_callers_own_versions(camp) -> None:  # type: ignore[no-untyped-def]
    """Issue 16: every sync used to download again what it had just uploaded. The pull leaves the caller's own
    versions out, still moving its cursor past them; the other tablets get every one of them."""
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    for _ in range(30):
        t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    with t1.read() as conn:
        from mobile.sync import cursor_of

        before = cursor_of(conn)
    report = c1.sync()  # 50 versions a batch here, so several pushes, then the pull
    assert report.pushed_versions > 300 and report.pulled_versions == 0
    with server.read() as conn:
        import sqlalchemy as sa

        from schema.sync.tables import field_version

        top = int(conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar_one())
    with t1.read() as conn:
        assert cursor_of(conn) == top > before  # moved past its own versions all the same
    # one page of 100 reads on past more than 100 of the caller's own versions to the end of the log
    page = http.get("/v1/sync/pull", params={"after": before, "limit": 100}, headers=c1.headers).json()
    assert (page["versions"], page["next"], page["more"]) == ([], top, False)
    assert page["own_left_out"] == report.pushed_versions
    # another tablet is sent every one of them
    got = c2.sync()
    assert got.pulled_versions == report.pushed_versions and t2.count(Find) == 30
    with t1.read() as a, t2.read() as b:
        mine = {r.id for r in a.execute(sa.select(field_version.c.id).where(field_version.c.device == t1.device_id()))}
        theirs = {r.id for r in b.execute(sa.select(field_version.c.id).where(field_version.c.device == t1.device_id()))}
    assert mine == theirs and len(mine) == report.pushed_versions


def test_the_batch_size_is_set_from_the_camp_link(camp) -> None:  # type: ignore[no-untyped-def]
    """A weak link wants short requests: CampLink's batch_size cuts the unsent work into batches that small."""
    import sqlalchemy as sa
    from fastapi.testclient import TestClient

    from mobile.controllers import CampLink
    from sync_server.tables import push_batch
    from tests.helpers import enrolled_tablet

    server, demo, http, tmp = camp
    tablet, device, _token = enrolled_tablet(server, tmp / "weak.sqlite", "TAB-W")
    tablet.set_setting("link.server", "http://testserver")
    link = CampLink(tablet, client_factory=lambda _server, _verify: TestClient(http.app), batch_size=7)
    link.sync()  # the site and a block
    for _ in range(3):
        tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    report = link.sync()
    with server.read() as conn:
        sizes = [a["received"] for a in conn.execute(sa.select(push_batch.c.ack).where(
            push_batch.c.device == device.id).order_by(push_batch.c.batch)).scalars()]
    assert report.pushed_versions == sum(sizes) > 14 and max(sizes) == 7 and len(sizes) == -(-sum(sizes) // 7)
    assert server.count(Find) == 3
    with pytest.raises(ValueError, match="batch size 5001 and page size 500 must be from 1 to 5000 and 2000"):
        CampLink(tablet, batch_size=5001)
