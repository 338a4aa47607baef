"""Who may write what: set-up records (and a unit's horizon) come only from a manager device or the server.

A recorder's versions of them are refused with a reason in the push answer, acknowledged with their batch (the
tablet never sends them again) and never stored; a manager's tablet may still set them up offline. The
recorder's own work (units, relations, level points, spits, setups, shots, fixes, safety checks, finds) flows.
"""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Any

import sqlalchemy as sa
from click.testing import CliRunner

from mobile.bundles import export_bundle
from mobile.controllers import FindController, UnitsController
from mobile.controllers.finds import Position
from mobile.store import TabletStore
from mobile.sync import SyncClient
from schema.demo_site import fit_demo_grid
from schema.records import (
    Find, GnssFix, Horizon, LevelPoint, Relation, SafetyCheck, Shot, Site, Spit, StationSetup, Trench, Unit,
)
from schema.survey.simulate import gnss_epoch
from schema.sync import batch_hash
from schema.sync.replica import load_identity, row_to_version
from schema.sync.tables import field_version
from schema.sync.versions import MANAGER_FIELDS, MANAGER_OWNED
from sync_server.cli import cli
from sync_server.sync import apply_push
from tests.helpers import find_data, start_field_day, synced_tablet


def _own_versions(store: Any) -> list[Any]:
    """The versions the tablet made itself, in the order it made them."""
    with store.read() as conn:
        me = load_identity(conn).device
        q = sa.select(field_version).where(field_version.c.device == me).order_by(field_version.c.seq)
        return [row_to_version(r) for r in conn.execute(q)]


def _held(server: Any, ids: list[str]) -> set[str]:
    with server.read() as conn:
        return set(conn.execute(sa.select(field_version.c.id).where(field_version.c.id.in_(ids))).scalars())


def _set_up_offline(tablet: TabletStore, demo: Any) -> dict[str, Any]:
    """On ``tablet``, offline: a new shoring depth for the site, a new trench, a new horizon and unit 101 moved
    into it, plus one find; returns the records."""
    site = tablet.put(tablet.get(Site, demo.site.id).model_copy(update={"shoring_check_depth_m": 3.0}))
    trench = tablet.add(Trench(site_id=demo.site.id, code="TR9", outline=[(0.0, 0.0), (2.0, 0.0), (2.0, 2.0)]))
    horizon = tablet.add(Horizon(site_id=demo.site.id, code="H9", label="Recorder's own horizon", order=9))
    unit = tablet.put(tablet.get(Unit, demo.units["101"].id).model_copy(update={"horizon_id": horizon.id}))
    find = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    return {"site": site, "trench": trench, "horizon": horizon, "unit": unit, "find": find}


def test_the_manager_set_names_every_set_up_record_and_the_unit_horizon() -> None:
    assert MANAGER_OWNED == {"site", "season", "trench", "control_point", "horizon", "horizon_assignment",
                             "age_determination", "correction"}
    assert MANAGER_FIELDS == {("unit", "horizon_id")}


def test_a_recorders_set_up_versions_are_refused_with_reasons_and_never_sent_again(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    made = _set_up_offline(t1, demo)
    report = c1.sync()

    expected = [v for v in _own_versions(t1) if v.record in ("site", "trench", "horizon")
                or (v.record, v.field) == ("unit", "horizon_id")]
    trench_fields = {v.field for v in expected if v.record == "trench"}
    assert {"site_id", "code", "outline"} <= trench_fields
    assert [(r["version"], r["record"], r["field"]) for r in report.refused] == [
        (v.id, v.record, v.field) for v in expected]
    by_field = {(r["record"], r["field"]): r["reason"] for r in report.refused}
    assert by_field[("site", "shoring_check_depth_m")] == (
        f"TAB-1 is a recorder device and may not set site.shoring_check_depth_m of site {demo.site.id} to 3. "
        "Site records are set up only by a manager device or the camp server, so this value was not applied; "
        "ask the data manager to make the change.")
    assert by_field[("unit", "horizon_id")] == (
        f"TAB-1 is a recorder device and may not set unit.horizon_id of unit {demo.units['101'].id} to "
        f"\"{made['horizon'].id}\". A unit's horizon is assigned only by a manager device or the camp server, so "
        "this value was not applied; ask the data manager to make the change.")
    assert by_field[("horizon", "order")].startswith(
        f"TAB-1 is a recorder device and may not set horizon.order of horizon {made['horizon'].id} to 9. Horizon "
        "records are set up only by a manager device")

    # nothing refused reached the server; the find did
    assert _held(server, [v.id for v in expected]) == set()
    assert server.get(Site, demo.site.id).shoring_check_depth_m == demo.site.shoring_check_depth_m
    assert server.list(Trench, code="TR9") == [] and server.list(Horizon, code="H9") == []
    assert server.get(Unit, demo.units["101"].id).horizon_id == demo.units["101"].horizon_id is not None
    assert server.get(Find, made["find"].id) == made["find"]
    ack = report.acks[0]
    assert ack["received"] == ack["applied"] + ack["duplicates"] + ack["ignored"] + len(ack["refused"])
    assert ack["ignored"] == 0 and ack["applied"] > 0

    # acknowledged with the batch: the tablet does not send them again
    assert c1.pending_count() == 0
    again = c1.sync()
    assert again.pushed_batches == 0 and again.refused == []

    # the same batch sent again is answered from the stored acknowledgement, refusals included
    first = c1._batch(1)  # noqa: SLF001
    r = http.post("/v1/sync/push", headers=c1.headers,
                  json={"batch": 1, "hash": batch_hash(first), "versions": [v.model_dump(mode="json") for v in first]})
    assert r.status_code == 200 and r.json()["replayed"] is True
    assert r.json()["refused"] == report.refused


def test_a_manager_tablet_sets_up_a_horizon_offline_and_it_is_applied(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    device, token = server.add_device(label="MGR-TAB", role="manager")
    server.issue_number_block(device_id=device.id, size=100)  # this manager records finds too
    tablet = TabletStore.open(tmp / "manager.sqlite")
    tablet.set_identity(device=device)
    client = SyncClient(tablet, http, token)
    client.sync()
    made = _set_up_offline(tablet, demo)
    report = client.sync()
    assert report.refused == [] and all(a["refused"] == [] for a in report.acks)
    assert server.get(Horizon, made["horizon"].id) == made["horizon"]
    assert server.get(Trench, made["trench"].id) == made["trench"]
    assert server.get(Unit, demo.units["101"].id).horizon_id == made["horizon"].id
    assert server.get(Site, demo.site.id).shoring_check_depth_m == 3.0
    tablet.close()


def test_a_recorders_own_work_still_flows(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    site, _fit, _poly = fit_demo_grid(demo)
    server.put(site)  # the camp server's own edit: the site grid, pulled by the tablet
    tablet, client = synced_tablet(server, http, tmp, "TAB-1")
    days, truth = start_field_day(tablet, demo)  # a setup on CP1 with its backsight shots, the laser check
    from mobile.instruments import ShotSimulator

    sim = ShotSimulator(truth)
    units = UnitsController(tablet, days)
    units.save_unit({"code": "150", "kind": "deposit", "description": "loose brown silt"})
    units.relate(upper="150", lower="101", kind="above")
    units.level_point(unit="150", surface="top", shot_line=sim.shot_line(1001.0, 2001.0, 100.1, target_height_m=1.5))
    units.save_unit({"status": "closed"}, code="102")  # an edit of a unit that has a horizon
    finds = FindController(tablet, days)
    finds.record(category="artifact", values={"material": "obsidian"},
                 position=Position("shot", shot_line=sim.shot_line(1001.2, 2001.4, 99.85, target_height_m=1.5)))
    days.feed_gnss(gnss_epoch(site, 1003.0, 2002.0, 99.9, dt.datetime.now(dt.timezone.utc), quality=4))
    finds.record(category="artifact", values={"material": "basalt"}, position=Position("gnss"))
    finds.record(category="artifact", values={"material": "chert"}, position=Position("sieve", spit=1, bucket="B1"))

    report = client.sync()
    assert report.refused == [] and report.pushed_versions > 0
    for model in (Unit, Relation, LevelPoint, Spit, StationSetup, Shot, GnssFix, SafetyCheck, Find):
        on_tablet = {r.id for r in tablet.list(model)}
        assert on_tablet and on_tablet == {r.id for r in server.list(model)}, model.__name__
    closed = server.get(Unit, demo.units["102"].id)
    assert closed.status == "closed" and closed.horizon_id == demo.units["102"].horizon_id is not None


def test_a_bundle_is_refused_the_same_set_up_versions(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, _c1 = synced_tablet(server, http, tmp, "TAB-1")
    made = _set_up_offline(t1, demo)
    refused = [v for v in _own_versions(t1) if v.record in ("site", "trench", "horizon")
               or (v.record, v.field) == ("unit", "horizon_id")]
    export_bundle(t1, tmp / "day.baulkbundle")
    url = server.engine.url.render_as_string(hide_password=False)
    r = CliRunner().invoke(cli, ["bundle", "import", str(tmp / "day.baulkbundle"), "--db", url])
    assert r.exit_code == 0, r.output
    lines = r.output.splitlines()
    assert lines[0].startswith("imported day.baulkbundle from TAB-1: 1 batches, ")
    assert lines[0].endswith(f"; {len(refused)} refused:")
    assert lines[1:] == [f"  refused {v.id}: " + _recorder_reason(v) for v in refused]
    assert _held(server, [v.id for v in refused]) == set()
    assert server.get(Find, made["find"].id) == made["find"]
    assert server.list(Horizon, code="H9") == []


def _recorder_reason(version: Any) -> str:
    from sync_server.sync import refusal
    from schema.records import Device

    return refusal(version, Device(label="TAB-1", role="recorder"))


def test_a_managers_bundle_is_applied(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    device, token = server.add_device(label="MGR-TAB", role="manager")
    server.issue_number_block(device_id=device.id, size=100)  # this manager records finds too
    tablet = TabletStore.open(tmp / "manager.sqlite")
    tablet.set_identity(device=device)
    tablet.set_token(token)
    SyncClient(tablet, http, token).sync()
    made = _set_up_offline(tablet, demo)
    export_bundle(tablet, tmp / "mgr.baulkbundle")
    from sync_server.bundles import import_bundle

    result = import_bundle(server, tmp / "mgr.baulkbundle")
    assert result["refused"] == [] and result["applied"] > 0
    assert server.get(Horizon, made["horizon"].id) == made["horizon"]
    tablet.close()


def test_an_ack_stored_before_refusals_existed_replays_with_none(camp) -> None:  # type: ignore[no-untyped-def]
    from sync_server.tables import push_batch

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    with server.atomic() as conn:  # as an older Baulk stored it
        (ack,) = conn.execute(sa.select(push_batch.c.ack).where(push_batch.c.batch == 1)).scalars()
        old = {k: v for k, v in ack.items() if k != "refused"}
        conn.execute(push_batch.update().where(push_batch.c.batch == 1).values(ack=old))
    first = c1._batch(1)  # noqa: SLF001
    r = http.post("/v1/sync/push", headers=c1.headers,
                  json={"batch": 1, "hash": batch_hash(first), "versions": [v.model_dump(mode="json") for v in first]})
    assert r.status_code == 200 and r.json()["replayed"] is True and r.json()["refused"] == []


def test_apply_push_refuses_an_analyst_too(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, _http, _tmp = camp
    analyst, _token = server.add_device(label="AN-1", role="analyst")
    from schema.sync import Version

    v = Version(id=f"{analyst.id}:1", record="age_determination", record_id=uuid.uuid4(), field="age_ka", value=12.5,
                wall_ms=1, counter=0, device=analyst.id, seq=1)
    ack = apply_push(server, device=analyst, batch=1, content_hash=batch_hash([v]), versions=[v])
    assert ack["applied"] == 0 and [r["version"] for r in ack["refused"]] == [v.id]
    assert ack["refused"][0]["reason"] == (
        f"AN-1 is an analyst device and may not set age_determination.age_ka of age_determination {v.record_id} to "
        "12.5. Age determination records are set up only by a manager device or the camp server, so this value was "
        "not applied; ask the data manager to make the change.")
