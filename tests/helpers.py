"""Small builders shared by tests (plain functions, no fixtures)."""

from __future__ import annotations

import datetime as dt
from typing import Any

from schema.demo_site import DemoSite


def find_data(demo: DemoSite, **changes: Any) -> dict[str, Any]:
    """A valid plotted obsidian flake in unit 101 of TR1; override any field."""
    unit = demo.units["101"]
    data: dict[str, Any] = dict(
        number=1, site_id=demo.site.id, season_id=demo.season.id, trench_id=unit.trench_id, unit_id=unit.id,
        category="artifact", material="obsidian", recovery="plotted", e=1001.25, n=2001.5, z=99.81,
        position_source="total_station", position_sigma_m=0.005,
        found_at=dt.datetime(2026, 7, 3, 9, 30, tzinfo=dt.timezone(dt.timedelta(hours=3))), recorder="AK",
    )
    data.update(changes)
    return data


def demo_tablet(path: Any, demo: DemoSite, *, label: str = "TAB-1", last: int = 100) -> Any:
    """A tablet file holding the demo site's set-up, enrolled (offline) as ``label`` with numbers 1..``last``."""
    from mobile.store import TabletStore
    from schema.records import Device, NumberBlock

    store = TabletStore.open(path)
    device = Device(label=label, role="recorder")
    with store.atomic():
        store.set_identity(device=device)
        store.add_number_block(block=NumberBlock(
            device_id=device.id, first=1, last=last, issued_at=dt.datetime(2026, 6, 30, tzinfo=dt.timezone.utc)))
        for record in demo.setup_records():
            store.add(record)
    return store


def seeded_server(url: str) -> tuple[Any, DemoSite]:
    """A server store at ``url`` holding the invented site's set-up."""
    from schema.demo_site import build_site
    from sync_server.store import ServerStore

    server = ServerStore.open(url)
    demo = build_site()
    with server.atomic():
        for record in demo.setup_records():
            server.add(record)
    return server, demo


def enrolled_tablet(server: Any, path: Any, label: str, *, block: int = 100) -> tuple[Any, Any, str]:
    """A recorder device with a number block, and a tablet file that knows it is that device."""
    from mobile.store import TabletStore

    device, token = server.add_device(label=label, role="recorder")
    server.issue_number_block(device_id=device.id, size=block)
    tablet = TabletStore.open(path)
    tablet.set_identity(device=device)
    tablet.set_token(token)
    return tablet, device, token


def unit_conflict(demo: DemoSite, a: tuple[Any, Any], b: tuple[Any, Any], find: Any) -> None:
    """Both tablets (store, sync client) hold ``find``; offline, one moves it to unit 102 and the other to 103;
    both sync: the server then holds a concurrent conflict on its unit."""
    (t1, c1), (t2, c2) = a, b
    c1.sync()
    c2.sync()
    from schema.records import Find

    t1.put(t1.get(Find, find.id).model_copy(update={"unit_id": demo.units["102"].id}))
    t2.put(t2.get(Find, find.id).model_copy(update={"unit_id": demo.units["103"].id}))
    c1.sync()
    c2.sync()


def synced_tablet(server: Any, http: Any, tmp: Any, label: str) -> tuple[Any, Any]:
    """An enrolled tablet file and its sync client over ``http``, after its first sync (site set-up, block)."""
    from mobile.sync import SyncClient

    tablet, _device, token = enrolled_tablet(server, tmp / f"{label}.sqlite", label)
    client = SyncClient(tablet, http, token, batch_size=50)
    client.sync()
    return tablet, client


def start_field_day(store: Any, demo: DemoSite, *, trench: str = "TR1", unit: str = "101",
                    orientation: float = 12.3456) -> tuple[Any, Any]:
    """A started day on ``trench`` (recorder AK) with the instrument on CP1, oriented on CP2 and CP3 from
    simulated BKS lines and accepted; returns (DayController, the true station the lines came from)."""
    from mobile.controllers import DayController
    from mobile.instruments import ShotSimulator
    from schema.survey.polar import Station

    days = DayController(store, laser_class="3R")
    days.start(site_code=demo.site.code, season_label=demo.season.label, trench_code=trench, recorder="AK")
    days.choose_unit(unit)
    cps = {cp.code: cp for cp in demo.control_points}
    truth = Station(cps["CP1"].e, cps["CP1"].n, cps["CP1"].z, 1.552, orientation)

    sim = ShotSimulator(truth)
    days.set_up_on_point(station="CP1", backsights=[(c, sim.shot_line(cps[c].e, cps[c].n, cps[c].z, target_height_m=1.5))
                                                    for c in ("CP2", "CP3")], instrument_height_m=1.552)
    days.accept_setup(laser_acknowledged_by="AK")
    return days, truth


def safety_day(server: Any, demo: DemoSite, http: Any, tmp: Any) -> Any:
    """A tablet records a shoring check today, a laser check ten days ago and possible human remains on a find
    today (as the tablet's controllers do), then syncs; returns that find."""
    from schema.records import SafetyCheck

    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    now = dt.datetime.now(dt.timezone.utc)
    unit = demo.units["101"]
    bone = t1.save_find(find=find_data(demo, number=t1.next_find_number(), category="fossil", material="bone",
                                       human_remains=True, found_at=now))
    base = dict(site_id=demo.site.id, trench_id=unit.trench_id, recorder="AK")
    t1.add(SafetyCheck(**base, kind="laser", answer="laser class 3R; acknowledged by AK",
                       checked_at=now - dt.timedelta(days=10)))
    t1.add(SafetyCheck(**base, unit_id=unit.id, kind="shoring", depth_m=1.35, checked_at=now - dt.timedelta(hours=2),
                       answer="east face benched; checked by JT"))
    t1.add(SafetyCheck(**base, unit_id=unit.id, find_id=bone.id, kind="human_remains", checked_at=now,
                       answer="work stopped at the spot; the spot secured", notified="site director RM at 10:40"))
    c1.sync()
    return bone


# Debian's Chromium, started the way this machine's closed network needs (no background connections)
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]


def chromium_or_skip() -> tuple[str, Any]:
    """(Chromium's path, playwright.sync_api) for a browser test module, or a module-level skip naming the fix
    (under CI a skipped ``browser`` test is a failure: tests/conftest.py)."""
    import os
    import shutil
    from pathlib import Path

    import pytest

    path = os.environ.get("BAULK_CHROMIUM", "/usr/bin/chromium")
    if not shutil.which(path) and not Path(path).exists():
        pytest.skip(f"no Chromium at {path}: install Debian's chromium package (.ci/run does)", allow_module_level=True)
    api = pytest.importorskip("playwright.sync_api", reason="Playwright drives the browser (in the test extra)")
    return path, api



def start_serve(db: Any, port: int, *, timeout_s: float = 30) -> Any:
    """A real ``baulk serve`` process on loopback for the SQLite file ``db``, once it answers /v1/status (the
    crash, backup and black-box tests kill and restart it)."""
    import subprocess
    import sys
    import time

    import httpx

    proc = subprocess.Popen([sys.executable, "-m", "sync_server.cli", "serve", "--port", str(port), "--db",
                             f"sqlite:///{db}"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/status", timeout=0.5).status_code == 200:
                return proc
        except httpx.TransportError:
            time.sleep(0.05)
    proc.kill()
    raise RuntimeError("the server did not start")


def number_clash(server: Any, demo: DemoSite, http: Any, tmp: Any) -> tuple[tuple[Any, Any], tuple[Any, Any], Any, Any]:
    """TAB-1 and TAB-2 both number a find 1 (TAB-2 was given TAB-1's block by hand in camp, the mistake the
    number checks guard against) and both sync: ((t1, c1), (t2, c2), TAB-1's find, TAB-2's chert find)."""
    from schema.records import NumberBlock

    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    t2.add_number_block(block=NumberBlock(device_id=t2.device_id(), first=1, last=100,
                                          issued_at=dt.datetime(2026, 7, 1, tzinfo=dt.timezone.utc)))
    a = t1.save_find(find=find_data(demo, number=1))
    b = t2.save_find(find=find_data(demo, number=1, material="chert"))
    c1.sync()
    c2.sync()
    return (t1, c1), (t2, c2), a, b
