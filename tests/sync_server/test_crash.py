"""The real server process (``baulk serve``) killed with SIGKILL at random points during pushes and pulls;
after restarts and retries every change is on the server exactly once and the file passes its integrity
check. The same for a tablet whose sync process is killed mid-sync."""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import pytest
import sqlalchemy as sa

from mobile.store import TabletStore
from mobile.sync import SyncClient
from schema.demo_site import build_site
from schema.errors import SyncError
from schema.sync.tables import field_version
from sync_server.loopback import free_port
from sync_server.store import ServerStore
from tests.helpers import enrolled_tablet, find_data, seeded_server, start_serve

KILLS = 50


def _start(db: Path, port: int) -> subprocess.Popen[bytes]:
    return start_serve(db, port)  # type: ignore[no-any-return]


def _ids(conn: sqlite3.Connection, device: str | None = None) -> list[str]:
    q = "SELECT id FROM field_version" + (" WHERE device = ?" if device else "")
    return [r[0] for r in conn.execute(q, (device,) if device else ())]


@pytest.mark.slow
def test_server_killed_at_random_points(tmp_path: Path) -> None:
    db = tmp_path / "camp.sqlite"
    server, demo = seeded_server(f"sqlite:///{db}")
    tablet, device, token = enrolled_tablet(server, tmp_path / "tab.sqlite", "TAB-1", block=100_000)
    server.close()
    port = free_port()
    rng = random.Random(7)
    proc = _start(db, port)
    client = SyncClient(tablet, httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=10), token, batch_size=40)
    client.sync()
    kills = 0
    try:
        while kills < KILLS:
            for _ in range(rng.randint(1, 6)):  # the tablet keeps recording between attempts
                tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), z=99.7))
            done = threading.Event()

            def attempt() -> None:
                try:
                    client.sync()
                except SyncError:
                    pass
                finally:
                    done.set()

            worker = threading.Thread(target=attempt)
            worker.start()
            time.sleep(rng.uniform(0.0, 0.25))
            proc.send_signal(signal.SIGKILL)
            proc.wait()
            kills += 1
            worker.join()
            proc = _start(db, port)
        client.sync()  # the server stays up now: everything arrives
        assert client.pending_count() == 0
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        client.http.close()
    with sqlite3.connect(db) as raw:
        assert raw.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        on_server = _ids(raw)
        assert len(on_server) == len(set(on_server))
        logged = [r[0] for r in raw.execute("SELECT log_seq FROM field_version")]
        assert None not in logged and len(logged) == len(set(logged))
        batches = raw.execute("SELECT device, batch FROM push_batch").fetchall()
        assert len(batches) == len(set(batches))
    with tablet.read() as conn:
        own = set(conn.execute(sa.select(field_version.c.id).where(field_version.c.device == device.id)).scalars())
    assert own <= set(on_server), f"{len(own - set(on_server))} versions never reached the server"
    assert tablet.integrity_check() == "ok"
    assert kills == KILLS
    tablet.close()


CHILD = r"""
import sys, httpx
from mobile.store import TabletStore
from mobile.sync import SyncClient
t = TabletStore.open(sys.argv[1])
SyncClient(t, httpx.Client(base_url=sys.argv[2], timeout=30), sys.argv[3], batch_size=20, page_size=50).sync()
"""


@pytest.mark.slow
def test_tablet_killed_mid_sync(tmp_path: Path) -> None:
    from sync_server.app import create_app
    from sync_server.loopback import serve_in_thread

    db = tmp_path / "camp.sqlite"
    demo = build_site()
    server = ServerStore.open(f"sqlite:///{db}")
    with server.atomic():
        for r in demo.setup_records():
            server.add(r)
    device, token = server.add_device(label="TAB-1", role="recorder")
    server.issue_number_block(device_id=device.id, size=100_000)
    path = tmp_path / "tab.sqlite"
    with TabletStore.open(path) as tablet:
        tablet.set_identity(device=device)
    rng = random.Random(3)
    with serve_in_thread(create_app(store=server)) as url:
        with TabletStore.open(path) as tablet, httpx.Client(base_url=url, timeout=30) as http:
            SyncClient(tablet, http, token).sync()  # enrolment: the site set-up and the number block
        first = True
        for _ in range(20):
            with TabletStore.open(path) as tablet:
                if not first:
                    for _k in range(rng.randint(5, 15)):
                        tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
            first = False
            child = subprocess.Popen([sys.executable, "-c", CHILD, str(path), url, token], cwd=os.getcwd())
            time.sleep(rng.uniform(0.2, 1.2))
            child.send_signal(signal.SIGKILL)
            child.wait()
            with sqlite3.connect(path) as raw:
                assert raw.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        with TabletStore.open(path) as tablet, httpx.Client(base_url=url, timeout=30) as http:
            client = SyncClient(tablet, http, token)
            client.sync()
            assert client.pending_count() == 0
            with tablet.read() as conn:
                own = set(conn.execute(sa.select(field_version.c.id).where(field_version.c.device == device.id)).scalars())
                everything = set(conn.execute(sa.select(field_version.c.id)).scalars())
    with server.read() as conn:
        on_server = set(conn.execute(sa.select(field_version.c.id)).scalars())
    server.close()
    assert own <= on_server
    assert everything >= on_server  # one tablet: it pulled everything the server holds
