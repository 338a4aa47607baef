"""Backups and recovery of the camp store (issue 16): ``baulk backup`` (a consistent snapshot, verified, in a
rotation, shown on the Today page), ``baulk restore`` (into a new store only, checked first) and ``baulk recover``
(the last backup plus the tablets' version logs, when the camp store is lost)."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import shutil
import sqlite3
import subprocess
import threading
import time
import uuid
from pathlib import Path
from typing import Any

import httpx
import pytest
import sqlalchemy as sa
from click.testing import CliRunner
from fastapi.testclient import TestClient

from mobile.store import TabletStore
from mobile.sync import SyncClient
from schema import db
from schema.errors import BackupError, BackupInvalid, StoreError, StoreExists
from schema.records import REGISTRY, Device, Find, NumberBlock
from sync_server.app import create_app
from sync_server.backup import backup_status, backup_store, restore_store, rotate
from sync_server.cli import cli
from sync_server.curation import correct_record
from sync_server.loopback import free_port
from sync_server.recovery import recover_store
from sync_server.store import ServerStore, number_floor
from sync_server.sync import list_conflicts, resolve_conflict
from tests.helpers import enrolled_tablet, find_data, seeded_server, start_serve, synced_tablet, unit_conflict

NOT_FROM_TABLETS = {"device", "number_block"}  # the server's own: checked apart below


def _rows(path: Path, table: str) -> dict[Any, dict[str, Any]]:
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as conn:
        conn.row_factory = sqlite3.Row
        return {r["id"]: dict(r) for r in conn.execute(f'SELECT * FROM "{table}"')}


def _ids(path: Path, sql: str) -> set[Any]:
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as conn:
        return {r[0] for r in conn.execute(sql)}


def _copy_sqlite(src: Path, dst: Path) -> None:
    with sqlite3.connect(src) as a, sqlite3.connect(dst) as b:
        a.backup(b)


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _record(tablet: TabletStore, demo: Any, n: int) -> list[Find]:
    return [tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), notes=f"afternoon {i}"))
            for i in range(n)]


# -- the lost store, rebuilt ----------------------------------------------------------------------------------
def test_recover_from_the_last_backup_and_three_tablets(tmp_path: Path) -> None:
    """The scenario: three synced tablets and a backup; an afternoon of work synced from the three (each using more
    than half of its block, so new blocks are issued after the backup; one editing another's find; a conflict
    settled at camp and pulled by all); then a camp correction no tablet
    pulled (only the server held it: it cannot come back) and two finds TAB-3 recorded after its last sync (the
    lost store never had them: they come back from the tablet). The server file is deleted; the new store is built
    from the backup and the three tablet files, and every record table is compared row by row with the lost one."""
    camp = tmp_path / "camp"
    camp.mkdir()
    url = f"sqlite:///{camp / 'server.sqlite'}"
    server, demo = seeded_server(url)
    with TestClient(create_app(store=server)) as http:
        (t1, c1), (t2, c2), (t3, c3) = (synced_tablet(server, http, tmp_path, f"TAB-{i}") for i in (1, 2, 3))
        for t, c in ((t1, c1), (t2, c2), (t3, c3)):
            _record(t, demo, 3)
            c.sync()
        morning = backup_store(url, tmp_path / "backups")
        # the afternoon, after the backup: enough finds for new number blocks, edits of each other's finds
        for t, c in ((t1, c1), (t2, c2), (t3, c3)):
            _record(t, demo, 52)
            c.sync()
        shared = _record(t1, demo, 1)[0]
        unit_conflict(demo, (t1, c1), (t2, c2), shared)
        (conflict,) = [c for c in list_conflicts(server) if c["record_id"] == str(shared.id)]
        resolve_conflict(server, record="find", record_id=shared.id, field="unit_id", value=str(demo.units["104"].id))
        t3.put(t3.get(Find, t2.list(Find, order_by="number")[-1].id).model_copy(update={"notes": "rolled edge (t3)"}))
        for c in (c3, c1, c2, c3):  # every tablet ends holding everything the camp had
            c.sync()
        assert t1.get(Find, shared.id).unit_id == demo.units["104"].id
        # only the server: a camp correction after every tablet's last sync
        with server.read() as conn:
            log_top = conn.execute(sa.text("SELECT max(log_seq) FROM field_version")).scalar_one()
        corrected = correct_record(server, record="find", key=str(shared.number), changes={"notes": "camp note"},
                                   reason="checked against the bag label", by="RM")
        # only TAB-3: two finds after its last sync
        unsent = _record(t3, demo, 2)
    blocks_after_backup = [b for b in server.list(NumberBlock)
                           if b.issued_at > dt.datetime.fromisoformat(morning["made_at"])]
    assert len(blocks_after_backup) >= 3, "the scenario must issue number blocks after the backup"
    with server.read() as conn:
        lost_floor = number_floor(conn)
    server.close()
    for t in (t1, t3):
        t.close()  # TAB-2 stays open, as a tablet app holding its file would
    lost = tmp_path / "lost.sqlite"
    _copy_sqlite(camp / "server.sqlite", lost)
    shutil.rmtree(camp)  # the laptop is gone

    files = [tmp_path / f"TAB-{i}.sqlite" for i in (1, 2, 3)]
    before = {f: (_digest(f), f.stat().st_mtime_ns) for f in files}
    assert files[1].with_name("TAB-2.sqlite-shm").exists()  # read through SQLite's reader protocol, app open
    new = tmp_path / "new" / "server.sqlite"
    r = recover_store(f"sqlite:///{new}", files, backup=Path(morning["path"]))
    assert {f: (_digest(f), f.stat().st_mtime_ns) for f in files} == before, "tablet files must be read only"
    assert not any(f.with_name(f.name + "-wal").exists() for f in (files[0], files[2]))
    t2.close()

    # every record table, row by row: all but the camp correction (server only) and TAB-3's unsent finds
    only_lost = {"find": {corrected.record.id}, "correction": {corrected.correction.id}}
    only_new = {"find": {f.id for f in unsent}}
    changed = {"find": {corrected.record.id}}  # the lost row carries the correction; the new row the value before it
    for table in db.record_names():
        if table in NOT_FROM_TABLETS:
            continue
        old, now = _rows(lost, table), _rows(new, table)
        key = lambda ids: {uuid.UUID(str(i)).hex for i in ids}  # noqa: E731 - ids as the files store them
        assert set(old) - set(now) == key(only_lost.get(table, set()) - changed.get(table, set())), table
        assert set(now) - set(old) == key(only_new.get(table, set())), table
        differing = {i for i in set(old) & set(now) if old[i] != now[i]}
        assert differing == key(changed.get(table, set())), table
    (row,) = [v for k, v in _rows(new, "find").items() if k == corrected.record.id.hex]
    assert row["notes"] == "afternoon 0" and row["unit_id"] == demo.units["104"].id.hex  # the settled conflict is back
    assert len(_rows(new, "find")) == 3 * 3 + 3 * 52 + 1 + 2

    # the version log: all but the correction's versions and the blocks issued after the backup (server-owned,
    # never taken from tablets), plus TAB-3's unsent edits
    old_log, new_log = (_ids(p, "SELECT id FROM field_version") for p in (lost, new))
    correction_versions = _ids(lost, f"SELECT id FROM field_version WHERE log_seq > {log_top}")
    late_blocks = (_ids(lost, "SELECT id FROM field_version WHERE record = 'number_block'")
                   - _ids(Path(morning["path"]), "SELECT id FROM field_version"))
    assert _ids(lost, f"SELECT DISTINCT record || '.' || CASE record WHEN 'find' THEN field ELSE '' END FROM "
                      f"field_version WHERE log_seq > {log_top}") == {"find.notes", "correction."} and late_blocks
    assert old_log - new_log == correction_versions | late_blocks
    t3_device = str(r["tablets"][2].device)
    assert new_log - old_log == {v for v in new_log - old_log if v.startswith(t3_device + ":")}
    assert len(new_log - old_log) == r["tablets"][2].unacked > 0

    # devices: not recoverable; those of the backup are back, revoked
    devices = _rows(new, "device")
    assert set(devices) == set(_rows(Path(morning["path"]), "device"))
    assert all(d["revoked_at"] for d in devices.values())
    # number blocks: those of the backup; the floor stands above every number any tablet held
    assert set(_rows(new, "number_block")) < set(_rows(lost, "number_block"))
    with ServerStore.open(f"sqlite:///{new}", create=False) as store:
        with store.read() as conn:
            new_floor = number_floor(conn)
        assert store.list(Device) and all(d.revoked_at for d in store.list(Device))
        # the lost store's own versions after the backup (the resolution) came back from the tablets under its old
        # identity, with sequence numbers above the backup's; the new store's edits must not reuse those ids (a
        # version whose id is held already is skipped): camp edits enough to pass them all are kept whole
        old_seqs = [int(v.split(":")[1]) for v in new_log if v.startswith(r["previous_identity"] + ":")]
        backup_seq = int(next(iter(_ids(Path(morning["path"]), "SELECT value FROM sync_state WHERE key = 'seq'"))))
        assert max(old_seqs) > backup_seq
        per_edit = len(correction_versions)
        edits = (max(old_seqs) - backup_seq) // per_edit + 2
        for n in range(edits):
            correct_record(store, record="find", key=str(shared.number), changes={"notes": f"camp note {n}"},
                           reason="checked against the bag label", by="RM")
        assert len(_ids(new, "SELECT id FROM field_version")) == len(new_log) + edits * per_edit
    assert new_floor >= lost_floor and new_floor == r["number_floor"] == r["floor_from_tablets"]
    assert r["floor_from_backup"] < lost_floor
    assert _ids(lost, "SELECT max(last) FROM number_block") == {new_floor}
    assert _ids(new, "PRAGMA integrity_check") == {"ok"}
    assert conflict["kind"] == "concurrent"


def test_a_recovered_store_takes_tablets_again_only_as_new_devices(tmp_path: Path) -> None:
    """After recovery the old tokens are refused, an old tablet file cannot become a new device, and a new tablet
    file enrolled with a new code pulls everything and gets numbers above the floor. The store's own new edits take
    a new identity, so none reuses an id the lost store gave out."""
    from mobile.enrol import enrol
    from sync_server.devices import make_code

    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    with TestClient(create_app(store=server)) as http:
        t1, c1 = synced_tablet(server, http, tmp_path, "TAB-1")
        _record(t1, demo, 4)
        c1.sync()
        old_token = t1.token()
    server.close()
    old_device = t1.device_id()
    t1.close()
    (tmp_path / "server.sqlite").unlink()
    new = f"sqlite:///{tmp_path / 'new.sqlite'}"
    r = recover_store(new, [tmp_path / "TAB-1.sqlite"])
    assert r["devices_revoked"] == 0 and r["counts"]["find"] == 4 and r["counts"]["device"] == 0
    store = ServerStore.open(new, create=False)
    with TestClient(create_app(store=store)) as http:
        refused = http.get("/v1/sync/pull", params={"after": 0}, headers={"Authorization": f"Bearer {old_token}"})
        assert refused.status_code == 401
        old = TabletStore.open(tmp_path / "TAB-1.sqlite")
        with pytest.raises(StoreError, match="already holds edits made as device .*Start a new tablet file"):
            old.set_identity(device=Device(label="TAB-1B", role="recorder"))
        old.close()
        fresh = TabletStore.open(tmp_path / "TAB-1-new.sqlite")
        _device, code, _ = make_code(store, label="TAB-1B", role="recorder")
        enrol(fresh, http, code)
        SyncClient(fresh, http, fresh.token()).sync()
        assert {f.number for f in fresh.list(Find)} == {1, 2, 3, 4}
        assert min(b.first for b in fresh.number_blocks()) > 100  # TAB-1's block was 1-100
    # the store's new edits (TAB-1B's number block) carry its new identity; the lost store's own versions (the
    # set-up, TAB-1's block) came back from the tablet under the old one
    devices = _ids(tmp_path / "new.sqlite", "SELECT DISTINCT device FROM field_version")
    store.close()
    lost_devices = _ids(tmp_path / "TAB-1.sqlite", "SELECT DISTINCT device FROM field_version")
    assert r["previous_identity"] is None  # a store built from tablets alone had made no edit of its own
    assert uuid.UUID(r["identity"]).hex in devices - lost_devices and len(lost_devices) == 2  # the lost store, TAB-1
    assert lost_devices < devices and old_device.hex in lost_devices  # type: ignore[union-attr]


def test_recover_refuses_what_is_not_a_tablet_file_and_writes_nothing(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, _demo = seeded_server(url)
    server.close()
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"not a database at all")
    new = tmp_path / "new.sqlite"
    with pytest.raises(StoreError) as exc:
        recover_store(f"sqlite:///{new}", [tmp_path / "server.sqlite"])
    assert str(exc.value) == (f"{tmp_path / 'server.sqlite'} is a camp server store, not a tablet file; a backup "
                              "of the camp store goes to --backup (a file written by baulk backup), the tablets' own "
                              "files to --from-tablet")
    with pytest.raises(StoreError, match="junk.sqlite is not a tablet file \\(it is not a SQLite database\\)"):
        recover_store(f"sqlite:///{new}", [junk])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["junk.sqlite", "server.sqlite"]


# -- baulk backup while baulk serve takes pushes ----------------------------------------------------------------
def _start(db: Path, port: int) -> subprocess.Popen[bytes]:
    return start_serve(db, port)  # type: ignore[no-any-return]


def test_backup_while_serve_takes_pushes_is_a_consistent_snapshot(tmp_path: Path) -> None:
    """Backups taken while a real ``baulk serve`` applies a tablet's pushes: each is the store at one moment, between
    two push transactions (every batch acknowledged in it has all its versions, no version without its batch, a row
    for every record with versions), passes its integrity check, and its sidecar's counts are the file's."""
    path = tmp_path / "camp.sqlite"
    url = f"sqlite:///{path}"
    server, demo = seeded_server(url)
    tablet, _device, token = enrolled_tablet(server, tmp_path / "tab.sqlite", "TAB-1", block=100_000)
    server.close()
    port = free_port()
    proc = _start(path, port)
    with httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=30) as http:
        SyncClient(tablet, http, token).sync()  # its number block
    for _ in range(150):
        tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    done = threading.Event()
    failed: list[BaseException] = []

    def push() -> None:
        try:
            with httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=30) as http:
                SyncClient(tablet, http, token, batch_size=30).sync()
        except BaseException as exc:  # noqa: BLE001 - reported by the test
            failed.append(exc)
        finally:
            done.set()

    worker = threading.Thread(target=push)
    made = []
    try:
        worker.start()
        while not done.is_set():
            made.append(backup_store(url, tmp_path / "backups", keep=1000))
        worker.join()
        made.append(backup_store(url, tmp_path / "backups", keep=1000))
    finally:
        proc.terminate()
        proc.wait()
    assert not failed, failed
    sizes = [m["counts"]["field_version"] for m in made]
    assert len({s for s in sizes if sizes[0] <= s < sizes[-1]}) >= 2, f"no backup fell between pushes: {sizes}"
    for m in made:
        with sqlite3.connect(f"file:{m['path']}?mode=ro", uri=True) as conn:
            assert conn.execute("PRAGMA integrity_check").fetchone() == ("ok",)
            for table, n in m["counts"].items():
                assert conn.execute(f'SELECT count(*) FROM "{table}"').fetchone()[0] == n
            acks = conn.execute("SELECT device, batch, ack FROM push_batch").fetchall()
            for device, batch, ack in acks:
                held = conn.execute("SELECT count(*) FROM field_version WHERE device = ? AND batch = ?",
                                    (device, batch)).fetchone()[0]
                assert held == json.loads(ack)["applied"], (m["file"], batch)
            orphans = conn.execute("SELECT count(*) FROM field_version v WHERE batch IS NOT NULL AND NOT EXISTS "
                                   "(SELECT 1 FROM push_batch b WHERE b.device = v.device AND b.batch = v.batch)")
            assert orphans.fetchone()[0] == 0
            # a find whose versions span two batches waits as a pending row until the rest arrives
            finds = conn.execute("SELECT count(DISTINCT record_id) FROM field_version WHERE record = 'find'").fetchone()
            waiting = conn.execute("SELECT count(*) FROM pending_row WHERE record = 'find'").fetchone()
            assert finds[0] == m["counts"]["find"] + waiting[0]
        assert json.loads(Path(m["path"] + ".json").read_text())["sha256"] == _digest(Path(m["path"]))
    with ServerStore.open(url, create=False) as store:
        assert backup_status(store, warn_hours=24)["text"].startswith("Last backup: ")
        with store.read() as conn:
            assert conn.execute(sa.text("SELECT count(*) FROM backup_log")).scalar_one() == len(made)
    tablet.close()


# -- rotation, the command's output ---------------------------------------------------------------------------
def test_rotation_keeps_the_newest_n_of_the_site_and_nothing_else(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, _demo = seeded_server(url)
    server.close()
    folder = tmp_path / "backups"
    folder.mkdir()
    other = [folder / "baulk-VLM2-20200101T000000Z.sqlite", folder / "baulk-VLM2-20200101T000000Z.sqlite.json",
             folder / "notes.txt", folder / "baulk-VLM-20200101T000000Z.sqlite"]  # the last: no sidecar, not ours
    for p in other:
        p.write_text("kept")
    stale, fresh = folder / ".baulk-backup-0a1b.sqlite.part", folder / ".baulk-backup-2c3d.sqlite.part"
    stale.write_text("a run killed yesterday")
    os.utime(stale, (time.time() - 90000, time.time() - 90000))
    fresh.write_text("another backup being written now")
    other.append(fresh)
    start = dt.datetime(2026, 7, 3, 9, 0, tzinfo=dt.timezone.utc)
    made = [backup_store(url, folder, keep=3, now=start + dt.timedelta(hours=h)) for h in range(5)]
    kept = sorted(p.name for p in folder.iterdir() if p not in other)
    assert kept == sorted(n for m in made[2:] for n in (m["file"], m["file"] + ".json"))
    assert [Path(p).name for p in made[3]["removed"]] == [made[0]["file"]]
    assert all(p.read_text() in ("kept", "another backup being written now") for p in other)
    assert not stale.exists()
    assert rotate(folder, "VLM", 1) == [Path(made[2]["path"]), Path(made[3]["path"])]
    same_second = backup_store(url, folder, keep=5, now=start + dt.timedelta(hours=4))
    assert same_second["file"] == "baulk-VLM-20260703T130000Z-2.sqlite"


def test_backup_restore_recover_commands(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    with TestClient(create_app(store=server)) as http:
        t1, c1 = synced_tablet(server, http, tmp_path, "TAB-1")
        _record(t1, demo, 2)
        c1.sync()
    server.close()
    t1.close()
    runner = CliRunner()
    folder = tmp_path / "stick"
    r = runner.invoke(cli, ["backup", "--to", str(folder), "--keep", "2", "--db", url])
    assert r.exit_code == 0, r.output
    (backup,) = folder.glob("*.sqlite")
    versions = json.loads(Path(f"{backup}.json").read_text())["counts"]["field_version"]
    lines = r.stdout.splitlines()
    assert lines[0].startswith(f"wrote {backup} (0.") and f", 2 finds, 12 units, {versions} versions; " in lines[0]
    counted = len(json.loads(Path(f"{backup}.json").read_text())["counts"])  # every table the store holds
    assert counted >= 21
    assert lines[0].endswith(f"verified: integrity ok, row counts of {counted} tables match the store")
    assert lines[1] == f"kept the newest 2 backups of VLM in {folder}"
    assert "[backup] snapshot of" in r.stderr and "[backup] checking the copy" in r.stderr

    r = runner.invoke(cli, ["restore", str(backup), "--db", url])
    assert r.exit_code == 1
    assert r.stderr.strip() == (
        f"Error: {tmp_path / 'server.sqlite'} is an existing Baulk store; a restore writes only a new store, so "
        f"nothing was changed: give --db a SQLite file that does not exist yet (e.g. sqlite:///"
        f"{tmp_path / 'server-restored.sqlite'}) and point baulk serve at it, or move this store aside first if it "
        "is the one to replace")
    r = runner.invoke(cli, ["restore", str(backup), "--db", f"sqlite:///{tmp_path / 'restored.sqlite'}"])
    assert r.exit_code == 0, r.output
    assert r.stdout.splitlines()[0].startswith(f"restored {backup.name} (the store at ")
    assert r.stdout.splitlines()[1] == (
        "The backup's 1 live devices are revoked here: the tablets' pull positions point into the lost store's change "
        "log, and an old tablet syncing with this store could skip changes. Enrol every device again (baulk device add --role recorder --label TAB-1), each tablet with a NEW tablet file: keep the "
        "old file (an old file cannot become a new device), start the app on a new one (baulk tablet --store "
        "NEW.sqlite) and enter the code; it pulls everything.")

    r = runner.invoke(cli, ["recover", "--from-tablet", str(tmp_path / "TAB-1.sqlite"), "--backup", str(backup),
                            "--db", f"sqlite:///{tmp_path / 'recovered.sqlite'}"])
    assert r.exit_code == 0, r.output
    out = r.stdout.splitlines()
    assert out[0] == f"recovered into sqlite:///{tmp_path / 'recovered.sqlite'}: 2 finds, 12 units, {versions} versions"
    assert out[2].startswith("  from TAB-1 (TAB-1.sqlite): ") and out[2].endswith(" versions, 0 new here")
    assert ("number floor 100: new number blocks start above it (the tablets' blocks and finds reach 100, the "
            "backup 100)") in out
    assert out[-1].startswith("Devices cannot be recovered from tablets: the server kept only their token hashes. "
                              "The backup's 1 live devices are revoked here: ")


# -- restore: new stores only, checked first ------------------------------------------------------------------
@pytest.fixture
def backed_up(tmp_path: Path) -> tuple[str, dict[str, Any]]:
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    with TestClient(create_app(store=server)) as http:
        t1, c1 = synced_tablet(server, http, tmp_path, "TAB-1")
        _record(t1, demo, 5)
        c1.sync()
    server.close()
    t1.close()
    return url, backup_store(url, tmp_path / "backups")


def test_restore_gives_the_store_back_fenced_off_from_the_lost_one(tmp_path: Path, backed_up: Any) -> None:
    url, made = backed_up
    target = tmp_path / "restored" / "server.sqlite"
    r = restore_store(Path(made["path"]), f"sqlite:///{target}")
    for table in db.record_names():
        old, new = _rows(tmp_path / "server.sqlite", table), _rows(target, table)
        if table == "device":
            assert set(old) == set(new) and all(d["revoked_at"] for d in new.values())
        else:
            assert old == new, table
    assert r["devices_revoked"] == 1 and r["counts"]["find"] == 5
    assert sorted(p.name for p in target.parent.iterdir()) == ["server.sqlite"]


def test_restore_refuses_an_existing_store_and_changes_nothing(tmp_path: Path, backed_up: Any) -> None:
    url, made = backed_up
    store = tmp_path / "server.sqlite"
    before = _digest(store)
    with pytest.raises(StoreExists, match="is an existing Baulk store; a restore writes only a new store"):
        restore_store(Path(made["path"]), url)
    other = tmp_path / "other.db"
    other.write_bytes(b"someone's notes")
    with pytest.raises(StoreExists) as exc:
        restore_store(Path(made["path"]), f"sqlite:///{other}")
    assert str(exc.value) == (f"{other} already exists (and is not a Baulk store); a restore writes only a new "
                              "store, so nothing was changed: give --db a SQLite file that does not exist yet")
    assert _digest(store) == before and other.read_bytes() == b"someone's notes"


def test_a_damaged_backup_fails_verification_and_nothing_is_restored(tmp_path: Path, backed_up: Any) -> None:
    _url, made = backed_up
    path = Path(made["path"])
    good = path.read_bytes()
    target = tmp_path / "restored" / "server.sqlite"

    def refused(match: str) -> str:
        with pytest.raises(BackupInvalid, match=match) as exc:
            restore_store(path, f"sqlite:///{target}")
        assert not target.parent.exists() or list(target.parent.iterdir()) == [], "nothing half-written"
        return str(exc.value)

    damaged = bytearray(good)
    damaged[len(good) // 2: len(good) // 2 + 16] = b"\xff" * 16  # bytes changed in the middle of the file
    path.write_bytes(bytes(damaged))
    message = refused("does not match the SHA-256")
    assert message == (f"{path} does not match the SHA-256 its sidecar recorded when it was written (expected "
                       f"{made['sha256'][:16]}..., found {_digest(path)[:16]}...): the file was changed or damaged "
                       "since; nothing was restored. Restore an older backup from the same folder (baulk restore "
                       "THAT-FILE --db URL), or copy this one again from where it was kept")

    # the same damage with the sidecar's hash made to match: SQLite's own check or the counts still refuse it
    sidecar = Path(made["path"] + ".json")
    info = json.loads(sidecar.read_text())
    cut = good[: len(good) - 4096 * 4]
    path.write_bytes(cut)
    sidecar.write_text(json.dumps({**info, "sha256": _digest(path)}))
    refused(f"the backup {path} (fails SQLite's integrity check|cannot be read as a SQLite database|holds)")

    path.write_bytes(good)
    sidecar.write_text(json.dumps({**info, "counts": {**info["counts"], "find": 6}}))
    assert refused("holds 5 rows of find where the store held 6") == (
        f"the backup {path} holds 5 rows of find where the store held 6; nothing was restored. Restore an older backup "
        "from the same folder (baulk restore THAT-FILE --db URL), or copy this one again from where it was kept")
    sidecar.unlink()
    refused(f"{path} has no sidecar {path.name}.json beside it")


def test_pg_dump_missing_is_named_with_the_fix(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("PATH", str(tmp_path))  # no PostgreSQL client programs here
    with pytest.raises(BackupError) as exc:
        backup_store("postgresql+psycopg://u:p@127.0.0.1:1/nowhere", tmp_path / "b")
    assert str(exc.value) == (
        "pg_dump and pg_restore are not on PATH; a PostgreSQL store is backed up and restored with PostgreSQL's own "
        "client programs: install them (on Debian: apt-get install postgresql-client, the server's major version or "
        "newer) or add their folder to PATH, then run the command again")
    assert not (tmp_path / "b").exists()


# -- PostgreSQL ------------------------------------------------------------------------------------------------
@pytest.mark.pg
def test_postgresql_backup_by_pg_dump_and_restore(pg_database: str, tmp_path: Path) -> None:
    if shutil.which("pg_dump") is None or shutil.which("pg_restore") is None:
        pytest.skip("pg_dump / pg_restore are not on PATH (Debian: apt-get install postgresql-client)")
    server, demo = seeded_server(pg_database)
    with TestClient(create_app(store=server)) as http:
        t1, c1 = synced_tablet(server, http, tmp_path, "TAB-1")
        _record(t1, demo, 4)
        c1.sync()
    before = {name: {str(getattr(r, "id")): r.model_dump() for r in server.list(REGISTRY[name].model)}
              for name in db.record_names()}
    server.close()
    t1.close()
    made = backup_store(pg_database, tmp_path / "backups", progress=lambda _m: None)
    assert made["file"].startswith("baulk-VLM-") and made["file"].endswith(".dump") and made["counts"]["find"] == 4
    listing = subprocess.run(["pg_restore", "--list", made["path"]], capture_output=True, text=True, check=True).stdout
    assert " TABLE DATA public field_version " in listing
    with ServerStore.open(pg_database, create=False) as store:
        assert backup_status(store, warn_hours=24)["warn"] is False
    with pytest.raises(StoreExists, match="is an existing Baulk store"):
        restore_store(Path(made["path"]), pg_database)
    from tests.conftest import _wipe_pg

    _wipe_pg(pg_database)
    r = restore_store(Path(made["path"]), pg_database)
    assert r["counts"]["find"] == 4 and r["devices_revoked"] == 1
    with ServerStore.open(pg_database, create=False) as store:
        for name in db.record_names():
            now = {str(getattr(x, "id")): x.model_dump() for x in store.list(REGISTRY[name].model)}
            if name == "device":
                assert set(now) == set(before[name]) and all(d["revoked_at"] for d in now.values())
            else:
                assert now == before[name], name
    # a damaged dump: refused before anything is restored
    _wipe_pg(pg_database)
    path = Path(made["path"])
    data = bytearray(path.read_bytes())
    data[-100:-90] = b"\x00" * 10
    path.write_bytes(bytes(data))
    with pytest.raises(BackupInvalid, match="does not match the SHA-256"):
        restore_store(path, pg_database)
    engine = sa.create_engine(pg_database)
    with engine.connect() as conn:
        assert sa.inspect(conn).get_table_names() == []
    engine.dispose()


# -- the Today page --------------------------------------------------------------------------------------------
def test_today_shows_the_last_backup_and_warns_when_it_is_old_or_missing(tmp_path: Path,
                                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    import re

    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, _demo = seeded_server(url)
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        token = server.add_device(label="MGR", role="manager")[1]
        r = http.post("/camp/sign-in", content=f"token={token}",
                      headers={"content-type": "application/x-www-form-urlencoded"})
        assert r.status_code == 303

        def line() -> str:
            page = http.get("/camp/").text
            found = re.search(r'<p class="card( error)?" id="backup">(.*?)</p>', page, re.S)
            assert found, page
            return ("WARN " if found.group(1) else "") + " ".join(found.group(2).split())

        assert line() == ("WARN No backup of this store has been made. The laptop holds the only copy of what the "
                          "tablets have not pulled: run baulk backup --to FOLDER (a USB stick or another disk), and "
                          "again every day.")
        old = dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=30)
        made = backup_store(url, tmp_path / "stick", now=old)
        assert line() == (f"WARN The last backup is older than 24 hours: {old:%Y-%m-%d %H:%M} UTC, 30 hours ago, "
                          f"to {made['path']}. Run baulk backup --to FOLDER now.")
        monkeypatch.setenv("BAULK_SERVER_BACKUP_WARN_HOURS", "36")
        assert line() == f"Last backup: {old:%Y-%m-%d %H:%M} UTC, 30 hours ago, to {made['path']}."
        monkeypatch.delenv("BAULK_SERVER_BACKUP_WARN_HOURS")
        made = backup_store(url, tmp_path / "stick")
        at = dt.datetime.fromisoformat(made["made_at"])
        assert line() == f"Last backup: {at:%Y-%m-%d %H:%M} UTC, 0 hours ago, to {made['path']}."
    server.close()
    assert os.environ.get("BAULK_SERVER_BACKUP_WARN_HOURS") is None
