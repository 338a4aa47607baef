"""Eight tablets pushing overlapping edits at once to a real server on loopback (SQLite and PostgreSQL): no
lock errors, no 5xx, and the final state equals the sequential merge of the same versions."""

from __future__ import annotations

import threading
from pathlib import Path

import httpx
import pytest
import sqlalchemy as sa

from mobile.sync import SyncClient
from schema.records import Find, Unit
from schema.sync import VersionSet
from schema.sync.replica import record_versions
from schema.sync.tables import field_version
from sync_server.app import create_app
from sync_server.loopback import serve_in_thread
from sync_server.store import ServerStore
from tests.helpers import enrolled_tablet, find_data, seeded_server


@pytest.mark.slow
def test_eight_pushers_at_once(tmp_path: Path, server_url: str) -> None:
    server, demo = seeded_server(server_url)
    with serve_in_thread(create_app(store=server)) as url:
        tablets = []
        for i in range(8):
            t, _device, token = enrolled_tablet(server, tmp_path / f"t{i}.sqlite", f"TAB-{i}", block=1000)
            client = SyncClient(t, httpx.Client(base_url=url, timeout=120), token, batch_size=25)
            client.sync()
            tablets.append((t, client))
        unit = demo.units["102"]
        for i, (t, _c) in enumerate(tablets):  # every tablet edits the same unit, and adds its own finds
            t.put(t.get(Unit, unit.id).model_copy(update={"description": f"tuff, described by tablet {i}"}))
            for _ in range(6):
                t.save_find(find=find_data(demo, number=t.next_find_number(), z=99.6 + i / 1000))
        errors: list[BaseException] = []

        def run(client: SyncClient) -> None:
            try:
                for _ in range(3):
                    client.sync()
            except BaseException as exc:  # noqa: BLE001 - collected and reported below
                errors.append(exc)

        threads = [threading.Thread(target=run, args=(c,)) for _t, c in tablets]
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        assert errors == []
        for _t, c in tablets:
            c.sync()
    assert server.count(Find) == 48
    # the same versions merged one by one, in any order, give the same visible unit
    with server.read() as conn:
        all_ids = conn.execute(sa.select(field_version.c.record_id).distinct()).scalars().all()
        versions = record_versions(conn, all_ids)
    sequential = VersionSet.of(sorted(versions, key=lambda v: v.id))
    assert server.get(Unit, unit.id).description == sequential.value(("unit", unit.id, "description"))
    assert {v["field"] for v in _conflicts(server)} == {"description"}
    for t, c in tablets:
        assert t.get(Unit, unit.id).description == server.get(Unit, unit.id).description
        assert t.count(Find) == 48
        c.http.close()
        t.close()
    server.close()


def _conflicts(server: ServerStore) -> list[dict]:  # type: ignore[type-arg]
    from sync_server.sync import list_conflicts

    return list_conflicts(server)
