"""The tablet store: durability settings, atomic saves, numbering, voiding."""

from __future__ import annotations

import datetime as dt
import sqlite3

import pytest

from tests.helpers import find_data
from mobile.store import TabletStore, inspect_file
from schema.demo_site import DemoSite
from schema.errors import DuplicateRecord, NoNumbersLeft, RecordInvalid, RecordNotFound, StoreError
from schema.records import Find, NumberBlock, Sample


def test_durability_pragmas(tablet: TabletStore) -> None:
    assert tablet.pragmas() == {"journal_mode": "wal", "synchronous": 2, "foreign_keys": 1, "busy_timeout": 10000}


def test_saved_find_reads_back_equal(tablet: TabletStore, demo_site: DemoSite) -> None:
    saved = tablet.save_find(find=find_data(demo_site, photo_hashes=["ab" * 32]))
    assert tablet.get(Find, saved.id) == saved
    assert saved.device_id == tablet.device_id()
    # read by a plain sqlite3 connection, not through Baulk: the row really is in the file
    with sqlite3.connect(tablet.path) as raw:
        assert raw.execute("SELECT number, material, z FROM find").fetchall() == [(1, "obsidian", 99.81)]


def test_find_and_sample_are_saved_together_or_not_at_all(tablet: TabletStore, demo_site: DemoSite) -> None:
    data = find_data(demo_site, category="sample", material="tephra")
    with pytest.raises(RecordInvalid) as exc:
        tablet.save_find(find=data, sample={"purpose": "tephra", "container": "", "volume_l": 1.0})
    assert exc.value.fields == ["container"]
    assert tablet.count(Find) == 0 and tablet.count(Sample) == 0
    saved = tablet.save_find(find=data, sample={"purpose": "tephra", "container": "bag", "volume_l": 1.0})
    (sample,) = tablet.list(Sample)
    assert sample.find_id == saved.id


def test_sample_details_required_for_samples_only(tablet: TabletStore, demo_site: DemoSite) -> None:
    with pytest.raises(RecordInvalid, match="a find of category 'sample' has no sample details"):
        tablet.save_find(find=find_data(demo_site, category="sample", material="tephra"))
    with pytest.raises(RecordInvalid, match="sample details were given for a artifact|for a artifact|artifact"):
        tablet.save_find(find=find_data(demo_site), sample={"purpose": "tephra", "container": "bag"})
    assert tablet.count(Find) == 0


def test_failure_inside_atomic_rolls_back_everything(tablet: TabletStore, demo_site: DemoSite) -> None:
    with pytest.raises(RuntimeError):
        with tablet.atomic():
            tablet.save_find(find=find_data(demo_site, number=1))
            tablet.save_find(find=find_data(demo_site, number=2))
            raise RuntimeError("power cut")
    assert tablet.count(Find) == 0


def test_numbers_come_from_the_block_in_order(tablet: TabletStore, demo_site: DemoSite) -> None:
    assert tablet.next_find_number() == 1
    for _ in range(3):
        tablet.save_find(find=find_data(demo_site, number=tablet.next_find_number()))
    assert tablet.next_find_number() == 4


def test_number_outside_block_is_refused(tablet: TabletStore, demo_site: DemoSite) -> None:
    with pytest.raises(RecordInvalid) as exc:
        tablet.save_find(find=find_data(demo_site, number=101))
    assert str(exc.value) == (
        "find refused, nothing was saved. number: find number 101 is outside this device's number blocks (1-100). "
        "Fix: take the next number from the device, or ask the data manager for a new block"
    )


def test_duplicate_number_is_refused_with_the_fix(tablet: TabletStore, demo_site: DemoSite) -> None:
    tablet.save_find(find=find_data(demo_site, number=7))
    with pytest.raises(DuplicateRecord) as exc:
        tablet.save_find(find=find_data(demo_site, number=7))
    assert str(exc.value) == "find with number=7 already exists; choose another number or edit the existing record"


def test_unknown_unit_is_named(tablet: TabletStore, demo_site: DemoSite) -> None:
    import uuid

    ghost = uuid.UUID(int=1)
    with pytest.raises(RecordNotFound) as exc:
        tablet.save_find(find=find_data(demo_site, unit_id=ghost))
    assert str(exc.value) == (
        f"find.unit_id names unit {ghost} which is not in this store; save the unit first or pick an existing one"
    )


def test_block_exhaustion_asks_for_sync(tmp_path, demo_site: DemoSite) -> None:  # type: ignore[no-untyped-def]
    from schema.records import Device

    with TabletStore.open(tmp_path / "t.sqlite") as store:
        device = Device(label="TAB-9", role="recorder")
        store.set_identity(device=device)
        store.add_number_block(block=NumberBlock(device_id=device.id, first=10, last=11,
                                                 issued_at=dt.datetime(2026, 7, 1, tzinfo=dt.timezone.utc)))
        for r in demo_site.setup_records():
            store.add(r)
        for _ in range(2):
            store.save_find(find=find_data(demo_site, number=store.next_find_number()))
        with pytest.raises(NoNumbersLeft, match="sync with the camp server to get a new block"):
            store.next_find_number()


def test_void_keeps_the_number(tablet: TabletStore, demo_site: DemoSite) -> None:
    saved = tablet.save_find(find=find_data(demo_site, number=5))
    voided = tablet.void_find(find_id=saved.id, reason="logged twice")
    assert voided.voided and voided.number == 5 and tablet.count(Find) == 1
    with pytest.raises(RecordInvalid, match="void_reason"):
        tablet.void_find(find_id=saved.id, reason="")


def test_inspect_reports_without_changing(tablet: TabletStore, demo_site: DemoSite) -> None:
    tablet.save_find(find=find_data(demo_site))
    report = inspect_file(tablet.path)
    assert report["integrity"] == "ok" and report["pending"] == [] and report["counts"]["find"] == 1


def test_inspect_refuses_a_file_that_is_not_a_store(tmp_path) -> None:  # type: ignore[no-untyped-def]
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database" * 100)
    with pytest.raises(StoreError) as exc:
        inspect_file(junk)
    assert str(exc.value) == (f"{junk} is not a tablet file (it is not a SQLite database); check the path and give "
                              "the tablet's own .sqlite file")


def test_opening_another_programs_database_adds_nothing_to_it(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """A SQLite file of another program (or a camp server store) is refused before the tablet's tables are made in
    it; an empty file is a new tablet file."""
    other = tmp_path / "birds.sqlite"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE sighting (species TEXT)")
    conn.close()
    before = other.read_bytes()
    with pytest.raises(StoreError) as exc:
        TabletStore.open(other)
    assert str(exc.value) == (f"{other} is not a tablet file (it is a SQLite database without Baulk's tablet "
                              "tables); check the path and give the tablet's own .sqlite file")
    assert other.read_bytes() == before and sorted(p.name for p in tmp_path.iterdir()) == ["birds.sqlite"]
    (tmp_path / "new.sqlite").touch()
    with TabletStore.open(tmp_path / "new.sqlite") as store:
        assert store.integrity_check() == "ok"


def test_the_log_is_copied_back_when_the_app_is_idle(tablet, demo_site) -> None:  # type: ignore[no-untyped-def]
    """The tablet raises SQLite's automatic checkpoint mark (saves stay quick) and copies the log back itself;
    nothing is lost either way (checked by SQLite's own integrity check and a fresh reader)."""
    import sqlite3

    from tests.helpers import find_data

    with tablet.engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA wal_autocheckpoint").scalar() == 10000
    for n in range(1, 6):
        tablet.save_find(find=find_data(demo_site, number=n))
    busy, log, copied = tablet.checkpoint()
    assert busy == 0 and log > 0 and copied == log
    other = sqlite3.connect(tablet.path)
    assert other.execute("SELECT count(*) FROM find").fetchone()[0] == 5
    assert other.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    other.close()


@pytest.mark.parametrize("kind", ["tablet", "camp"])
def test_opening_a_store_again_keeps_this_processs_locks_on_it(tmp_path, kind: str) -> None:  # type: ignore[no-untyped-def]
    """Opening a store checks what the file is; that look must go through SQLite, never a Python open()/close():
    closing any descriptor on a file drops every POSIX lock the process holds on it, so another process would take
    itself for the file's last user and fold the write-ahead log back and delete it under a living connection
    (sqlite.org, "How To Corrupt An SQLite Database File", section 2.2). Seen as a damaged tablet file and a push
    batch whose content changed after a tablet was killed mid-sync (tests/sync_server/test_crash.py)."""
    import subprocess
    import sys

    from sync_server.store import ServerStore

    path = tmp_path / "store.sqlite"

    def open_store():  # type: ignore[no-untyped-def]
        return TabletStore.open(path) if kind == "tablet" else ServerStore.open(f"sqlite:///{path}", create=False)

    (TabletStore.open(path) if kind == "tablet" else ServerStore.open(f"sqlite:///{path}")).close()  # made
    held = sqlite3.connect(path)  # another connection of this process, left open (WAL: it holds a shared lock)
    try:
        held.execute("SELECT count(*) FROM sqlite_master").fetchone()
        open_store().close()
        # another process writes and closes: it folds the log back and deletes it only if it is the last user
        subprocess.run([sys.executable, "-c", "import sqlite3, sys; c = sqlite3.connect(sys.argv[1]); "
                        "c.execute('CREATE TABLE IF NOT EXISTS other_process (x)'); c.commit(); c.close()", str(path)],
                       check=True)
        assert path.with_name(path.name + "-wal").exists(), "the other process took itself for the file's last user"
        assert held.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    finally:
        held.close()
