"""A version's identity is its device's: its id must be ``<its device>:<its sequence>``.

A recorder that names its versions after another device's sequence numbers (or the server's) would have the real
versions of those ids skipped as duplicates and lost for good. Such a batch is refused whole on push, bundle
import and pull, and nothing of it is applied.
"""

from __future__ import annotations

import uuid
from typing import Any

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from mobile import outbox
from mobile.sync import SyncReport
from schema.errors import VersionIdMismatch
from schema.records import Find
from schema.sync import Version, batch_hash, version_id
from schema.sync.bundle import write_bundle
from schema.sync.replica import load_identity, state_get
from schema.sync.tables import field_version
from schema.sync.versions import check_version_ids, misnamed
from sync_server.cli import cli
from sync_server.tables import push_batch
from tests.helpers import find_data, synced_tablet

FIX = ("A tablet names each version by its own device and sequence, so this batch was altered after the tablet "
       "wrote it; ask the data manager to check that tablet and re-enrol it as a new device.")


def _unsent(tablet: Any) -> tuple[int, list[Version]]:
    outbox.cut_batches(tablet)
    (number,) = outbox.unacked_batches(tablet)
    return number, outbox.batch_versions(tablet, number)


def _renamed(versions: list[Version], device: uuid.UUID, first_seq: int) -> list[Version]:
    """The same versions (still claiming their own device and sequence) named after ``device``'s sequence."""
    return [v.model_copy(update={"id": version_id(device, first_seq + k)}) for k, v in enumerate(versions)]


def _post(http: Any, headers: dict[str, str], batch: int, versions: list[Version]) -> Any:
    return http.post("/v1/sync/push", headers=headers, json={
        "batch": batch, "hash": batch_hash(versions), "versions": [v.model_dump(mode="json") for v in versions]})


def _counts(server: Any) -> tuple[int, int]:
    with server.read() as conn:
        return (int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one()),
                int(conn.execute(sa.select(sa.func.count()).select_from(push_batch)).scalar_one()))


def _message(where: str, v: Version, fix: str) -> str:
    return (f"{where} holds a version of {v.record}.{v.field} of {v.record} {v.record_id} named {v.id!r}, but a "
            f"version's id must be its device and sequence, {version_id(v.device, v.seq)!r}; nothing of it was "
            f"applied. {fix}")


def test_the_rule_is_a_pure_function() -> None:
    device, other = uuid.UUID(int=1), uuid.UUID(int=2)
    good = Version(id=version_id(device, 7), record="find", record_id=uuid.UUID(int=3), field="material",
                   value="chert", wall_ms=1, counter=0, device=device, seq=7)
    assert misnamed([good]) is None
    check_version_ids([good], where="batch 1 of TAB-1", fix="Fix it.")  # nothing raised
    for wrong_id in (version_id(other, 7), version_id(device, 8), f"{device}:07", f"{device}:7:x"):
        bad = good.model_copy(update={"id": wrong_id})
        assert misnamed([good, bad]) is bad
        with pytest.raises(VersionIdMismatch) as exc:
            check_version_ids([good, bad], where="batch 1 of TAB-1", fix="Fix it.")
        assert str(exc.value) == (
            f"batch 1 of TAB-1 holds a version of find.material of find {good.record_id} named {wrong_id!r}, but a "
            f"version's id must be its device and sequence, '{device}:7'; nothing of it was applied. Fix it.")


def test_a_push_naming_another_devices_versions_is_refused_whole_and_theirs_still_arrive(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    theirs = t2.save_find(find=find_data(demo, number=t2.next_find_number(), material="chert"))
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    number, mine = _unsent(t1)
    _n2, real = _unsent(t2)
    before = _counts(server)
    # TAB-1's own edits (its own device inside each version), named after TAB-2's next sequence numbers
    forged = _renamed(mine, t2.device_id(), real[0].seq)
    r = _post(http, c1.headers, number, forged)
    assert r.status_code == 422
    assert r.json() == {"code": "VersionIdMismatch",
                        "message": _message(f"batch {number} of TAB-1", forged[0], FIX)}
    assert _counts(server) == before  # nothing stored, no acknowledgement kept
    # and the server's own sequence (its device id, e.g. :999)
    with server.read() as conn:
        camp_device = load_identity(conn).device
    r = _post(http, c1.headers, number, _renamed(mine, camp_device, 999))
    assert r.status_code == 422 and r.json()["code"] == "VersionIdMismatch"
    assert _counts(server) == before
    # TAB-2's real edits under those ids are not taken for duplicates: they arrive whole
    report = c2.sync()
    assert report.acks[0]["applied"] == len(real) and report.acks[0]["duplicates"] == 0
    assert server.get(Find, theirs.id) == theirs
    # the honest batch of TAB-1 still goes through under its own number
    assert c1.sync().acks[0]["applied"] == len(mine)


def test_a_bundle_naming_another_devices_versions_is_refused_and_nothing_is_applied(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, _c2 = synced_tablet(server, http, tmp, "TAB-2")
    for _ in range(3):
        t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    outbox.cut_batches(t1, size=20)
    numbers = outbox.unacked_batches(t1)
    batches = [(n, outbox.batch_versions(t1, n)) for n in numbers]
    assert len(batches) >= 2
    last_number, last = batches[-1]
    forged = _renamed(last, t2.device_id(), 1)  # the first batches are honest, the last is not
    path = tmp / "forged.baulkbundle"
    write_bundle(path, device=t1.device_id(), label="TAB-1", token=t1.token(),
                 batches=[*batches[:-1], (last_number, forged)])
    before = _counts(server)
    url = server.engine.url.render_as_string(hide_password=False)
    r = CliRunner().invoke(cli, ["bundle", "import", str(path), "--db", url])
    assert r.exit_code == 1
    assert r.output == "Error: " + _message(f"forged.baulkbundle: batch {last_number}", forged[0], (
        "A tablet names each version by its own device and sequence, so this bundle was altered after the tablet "
        "wrote it; ask the data manager to check that tablet and re-enrol it as a new device.")) + "\n"
    assert _counts(server) == before and server.count(Find) == 0


def test_a_pulled_version_named_as_anothers_is_refused_and_nothing_is_applied(camp) -> None:  # type: ignore[no-untyped-def]
    from schema.errors import SyncError

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    find = t2.save_find(find=find_data(demo, number=t2.next_find_number()))
    c2.sync()
    c1.sync()
    # a server that took a version named as another's before the rule held (written straight into its log)
    with server.atomic() as conn:
        top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar_one()
        honest = Version(id=version_id(t2.device_id(), 900), record="find", record_id=find.id, field="material",
                         value="quartz", wall_ms=2**40, counter=0, device=t2.device_id(), seq=900)
        forged = honest.model_copy(update={"id": version_id(t1.device_id(), 900), "seq": 901, "wall_ms": 2**40 + 1})
        for k, v in enumerate([honest, forged], start=1):
            conn.execute(field_version.insert().values(
                **{**v.model_dump(), "parents": [], "batch": None, "log_seq": top + k}))
    with t1.read() as conn:
        cursor = int(state_get(conn, "cursor"))
        held = int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())
    with pytest.raises(SyncError) as exc:
        c1.pull(SyncReport())
    assert isinstance(exc.value, VersionIdMismatch)
    assert str(exc.value) == _message(f"the camp server's page of changes after {cursor}", forged, (
        "A version is named by the device that made it, so the camp server holds a version it should have "
        "refused; update Baulk on the camp server, then sync again."))
    with t1.read() as conn:  # the page was not applied, not even its honest version, and the cursor stayed
        assert int(state_get(conn, "cursor")) == cursor
        assert int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one()) == held
    assert t1.get(Find, find.id).material == find.material
