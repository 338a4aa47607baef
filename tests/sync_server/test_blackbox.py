"""The outside tester's scenario of issue 16, kept as a slow test: three tablets against a real ``baulk serve``
process. TAB-USB never touches the Wi-Fi: it records 2,000 finds on number blocks that reach it only by return
bundle. TAB-1 and TAB-2 sync over HTTP; the three make overlapping offline edits; the server is killed (SIGKILL)
in the middle of a push and started again; a push is replayed by hand; a manager resolves every conflict over
HTTP and the resolutions reach TAB-USB by bundle. Afterwards every replica holds the same rows, record by record,
nothing is lost or held twice, and every file passes SQLite's integrity check."""

from __future__ import annotations

import random
import signal
import sqlite3
import subprocess
import threading
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from mobile.bundles import export_bundle, read_return_bundle
from mobile.sync import SyncClient
from schema.errors import SyncError
from schema.records import REGISTRY, Find, NumberBlock
from schema.sync import batch_hash
from sync_server.bundles import import_bundle, write_for_tablet
from sync_server.loopback import free_port
from tests.helpers import enrolled_tablet, find_data, seeded_server, start_serve

USB_FINDS = 2000
WIFI_FINDS = 150
ROUND = 200  # finds TAB-USB records between two trips to camp (its blocks hold 500: a new one at half used)
WIFI_ROUND = 50  # finds a Wi-Fi tablet records between two syncs (its blocks hold 100)


def _start(db: Path, port: int) -> subprocess.Popen[bytes]:
    return start_serve(db, port, timeout_s=60)  # type: ignore[no-any-return]


def _sync(client: SyncClient) -> None:
    """Sync as a tablet's user does: again after a dropped connection, until it goes through."""
    for _ in range(20):
        try:
            client.sync()
            return
        except SyncError:
            time.sleep(0.3)
    client.sync()


def _usb_trip(server: Any, tablet: Any, stick: Path) -> None:
    """TAB-USB's day at camp: its bundle imported, its return bundle written and read on the tablet."""
    made = export_bundle(tablet, stick)
    import_bundle(server, Path(made["path"]))
    back = write_for_tablet(server, label="TAB-USB", out=stick)
    read_return_bundle(tablet, Path(back["path"]))


def _rows(store: Any) -> dict[str, list[Any]]:
    """Every record table's rows as records, by id; devices and number blocks are the server's own (a tablet
    holds its own device row and its own blocks only), so they are compared apart."""
    out = {}
    for name, spec in REGISTRY.items():
        if name in ("device", "number_block"):
            continue
        out[name] = sorted(store.list(spec.model), key=lambda r: str(r.id))
    return out


def _batches(db: Path, device: Any) -> int:
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as conn:
        return int(conn.execute("SELECT count(*) FROM push_batch WHERE device = ?", (device.hex,)).fetchone()[0])


def _integrity(path: Path) -> str:
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as conn:
        return str(conn.execute("PRAGMA integrity_check").fetchone()[0])


@pytest.mark.slow
def test_three_tablets_one_by_usb_a_killed_server_and_a_replay_converge(tmp_path: Path) -> None:
    rng = random.Random(16)
    db = tmp_path / "camp.sqlite"
    server, demo = seeded_server(f"sqlite:///{db}")
    tablets = {label: enrolled_tablet(server, tmp_path / f"{label}.sqlite", label, block=500 if "USB" in label else 100)
               for label in ("TAB-1", "TAB-2", "TAB-USB")}
    usb = tablets["TAB-USB"][0]
    manager = {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}
    stick = tmp_path / "stick"
    stick.mkdir()
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    proc = _start(db, port)
    http = httpx.Client(base_url=base, timeout=30)
    clients = {label: SyncClient(tablets[label][0], http, tablets[label][2], batch_size=100)
               for label in ("TAB-1", "TAB-2")}
    try:
        # the USB-only tablet gets the site and its first block by return bundle alone
        read_return_bundle(usb, Path(write_for_tablet(server, label="TAB-USB", out=stick)["path"]))
        for c in clients.values():
            _sync(c)
        made: dict[str, list[Any]] = {label: [] for label in tablets}
        for label, (t, _d, _tok) in tablets.items():
            count = USB_FINDS if label == "TAB-USB" else WIFI_FINDS
            for k in range(count):
                made[label].append(t.save_find(find=find_data(demo, number=t.next_find_number(),
                                                              z=round(99.75 + rng.uniform(-0.05, 0.05), 3))))
                if label == "TAB-USB" and (k + 1) % ROUND == 0:
                    _usb_trip(server, usb, stick)
                elif label != "TAB-USB" and (k + 1) % WIFI_ROUND == 0 and k + 1 < count:
                    _sync(clients[label])
        # the server is killed in the middle of TAB-1's push, then started again; TAB-1 syncs until it goes through
        before = _batches(db, tablets["TAB-1"][1].id)
        killed = threading.Thread(target=lambda: _try(clients["TAB-1"]))
        killed.start()
        deadline = time.monotonic() + 60
        while _batches(db, tablets["TAB-1"][1].id) == before and time.monotonic() < deadline:
            time.sleep(0.005)  # the first batch of this sync is in: the kill lands among the rest
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        killed.join()
        assert clients["TAB-1"].pending_count() > 0  # the push was cut short
        proc = _start(db, port)
        _sync(clients["TAB-1"])
        _sync(clients["TAB-2"])
        _usb_trip(server, usb, stick)
        _sync(clients["TAB-1"])
        # a push sent again by hand: nothing applied again, and the answer says so
        first = clients["TAB-1"]._batch(1)  # noqa: SLF001
        r = http.post("/v1/sync/push", headers=clients["TAB-1"].headers,
                      json={"batch": 1, "hash": batch_hash(first), "versions": [v.model_dump(mode="json") for v in first]})
        assert r.status_code == 200 and r.json()["replayed"] is True and r.json()["applied"] == 0
        # overlapping offline edits: the same finds moved by two tablets that had not seen each other's move
        shared = [made["TAB-1"][0], made["TAB-2"][0], made["TAB-USB"][0]]
        for f in shared:
            for t, unit, note in ((tablets["TAB-1"][0], "102", "seen by TAB-1"), (tablets["TAB-2"][0], "103", None),
                                  (usb, "104", "seen on the USB tablet")):
                now = t.get(Find, f.id)
                t.put(now.model_copy(update={"unit_id": demo.units[unit].id, **({"notes": note} if note else {})}))
        _sync(clients["TAB-1"])
        _sync(clients["TAB-2"])
        _usb_trip(server, usb, stick)
        listed = http.get("/v1/conflicts", headers=manager).json()
        assert listed["count"] >= len(shared) and listed["count"] == len(listed["data"])
        for c in listed["data"]:
            r = http.post("/v1/conflicts/resolve", headers=manager, json={
                "record": c["record"], "record_id": c["record_id"], "field": c["field"], "value": c["values"][0]["value"]})
            assert r.status_code == 200 and r.json()["still_open"] is None, r.text
        assert http.get("/v1/conflicts", headers=manager).json()["count"] == 0
        # every tablet catches up: the resolutions reach TAB-USB by return bundle
        _usb_trip(server, usb, stick)
        for c in clients.values():
            _sync(c)
    finally:
        http.close()
        proc.terminate()
        proc.wait(timeout=30)
    replicas = {"camp": server, **{label: t for label, (t, _d, _tok) in tablets.items()}}
    rows = {name: _rows(store) for name, store in replicas.items()}
    for name in ("TAB-1", "TAB-2", "TAB-USB"):
        for table, records in rows["camp"].items():
            assert rows[name][table] == records, f"{name} differs from the camp in {table}"
    finds = rows["camp"]["find"]
    sent = {f.id for batch in made.values() for f in batch}
    assert {f.id for f in finds} == sent and len(finds) == USB_FINDS + 2 * WIFI_FINDS  # nothing lost, none twice
    assert len({f.number for f in finds}) == len(finds)  # no number used twice
    assert all(usb.get(Find, f.id).unit_id == server.get(Find, f.id).unit_id for f in shared)
    for label, (t, device, _tok) in tablets.items():  # each tablet holds every block issued to it, and no other
        assert {b.id for b in t.list(NumberBlock)} == {b.id for b in server.blocks_for(device.id)}, label
    assert len(server.blocks_for(tablets["TAB-USB"][1].id)) >= 4  # 2,000 finds on blocks of 500: by bundle alone
    server.close()
    for t, _d, _tok in tablets.values():
        t.close()
    for path in (db, *(tmp_path / f"{label}.sqlite" for label in tablets)):
        assert _integrity(path) == "ok", path


def _try(client: SyncClient) -> None:
    try:
        client.sync()
    except SyncError:
        pass
