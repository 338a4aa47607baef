"""A find's ``photo_hashes`` follows its photo records (issue 19): a photo taken adds its hash, a photo voided
(``PhotoController.void``) removes it, and tablet migration m0014 back-fills, once, the hashes of photos taken
before the field followed them. Each change is a versioned save, so a sync to a camp server on loopback leaves
the camp's find with the same hashes."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import httpx
import pytest

from mobile.controllers.photos import PhotoController
from mobile.migrations import AFTER_KEY
from mobile.photos import inspect_image, keep_file, next_photo_number, photo_folder
from mobile.store import TabletStore
from mobile.sync import SyncClient
from schema.errors import RecordInvalid
from schema.records import Find, Photo
from schema.validation import check
from sync_server.app import create_app
from sync_server.loopback import serve_in_thread
from tests.helpers import find_data, seeded_server, start_field_day, synced_tablet
from tests.mobile.test_photos import picture

MIGRATION = "0014_photo_hashes_follow"


@pytest.fixture()
def camp(tmp_path: Path) -> Any:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        yield server, demo, http, tablet, client
        tablet.close()
    server.close()


def test_a_voided_photo_leaves_its_finds_hashes_here_and_at_camp(camp: Any, tmp_path: Path) -> None:
    server, demo, _http, tablet, client = camp
    days, _truth = start_field_day(tablet, demo)
    photos = PhotoController(days)
    found = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    target = photos.of_find(found.id, found.number)
    blurred = photos.keep(target, picture(tmp_path, "a.jpg", seed=51))
    sharp = photos.keep(target, picture(tmp_path, "b.jpg", seed=52))
    assert tablet.get(Find, found.id).photo_hashes == [blurred.sha256, sharp.sha256]
    client.sync()
    assert sorted(server.get(Find, found.id).photo_hashes) == sorted([blurred.sha256, sharp.sha256])

    with pytest.raises(RecordInvalid, match=f"^void of photo P{blurred.number} refused, nothing was saved. reason: "
                       "a void needs a reason"):  # a reason is needed; nothing changes without one
        photos.void(blurred, "  ")
    with pytest.raises(RecordInvalid, match=f"^void of photo P{blurred.number} refused, nothing was saved. "
                       "void_reason: "):  # longer than the register keeps (500 characters)
        photos.void(blurred, "x" * 501)
    assert tablet.get(Find, found.id).photo_hashes == [blurred.sha256, sharp.sha256]

    photos.void(blurred, "out of focus")
    assert tablet.get(Photo, blurred.id).voided and tablet.get(Photo, blurred.id).void_reason == "out of focus"
    assert tablet.get(Find, found.id).photo_hashes == [sharp.sha256]
    assert [p.id for p in photos.photos_of(found.id)] == [sharp.id]
    client.sync()
    assert server.get(Find, found.id).photo_hashes == [sharp.sha256]  # the removal travelled as a version
    assert server.get(Photo, blurred.id).voided


def _old_photo(tablet: Any, demo: Any, find: Find, path: Path, **more: Any) -> Photo:
    """A photo record as ``save_photo`` wrote it before the find's hashes followed: the file and the record,
    the find untouched."""
    data = path.read_bytes()
    facts = inspect_image(data)
    keep_file(photo_folder(tablet), data, facts.sha256)
    with tablet.atomic() as conn:
        photo = check(Photo, {"site_id": demo.site.id, "sha256": facts.sha256, "number": next_photo_number(tablet, conn),
                              "device_id": tablet.device_id(), "subject": "find", "subject_id": find.id,
                              "trench_id": find.trench_id, "taken_at": dt.datetime.now(dt.timezone.utc), "by": "AK",
                              "width_px": facts.width, "height_px": facts.height, "bytes": facts.bytes, **more})
        tablet.save_versioned(conn, photo, new=True)
    return photo


def _versions(tablet: TabletStore) -> int:
    with tablet.read() as conn:
        return int(conn.exec_driver_sql("SELECT count(*) FROM field_version").scalar_one())


def test_the_tablet_back_fills_the_hashes_of_older_photos_once_and_the_camp_gets_them(camp: Any,
                                                                                       tmp_path: Path) -> None:
    server, demo, http, tablet, client = camp
    missing = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    older = _old_photo(tablet, demo, missing, picture(tmp_path, "c.jpg", seed=61))
    stale = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), e=1000.7))
    voided = _old_photo(tablet, demo, stale, picture(tmp_path, "d.jpg", seed=62), voided=True,
                        void_reason="wrong find")
    tablet.update_find(find=tablet.get(Find, stale.id).model_copy(update={"photo_hashes": [voided.sha256, "a" * 64]}))
    client.sync()
    assert server.get(Find, missing.id).photo_hashes == []  # the camp holds the old state
    assert sorted(server.get(Find, stale.id).photo_hashes) == sorted([voided.sha256, "a" * 64])  # a set field

    # the file as an older Baulk left it: m0014 not yet applied
    with tablet.atomic() as conn:
        conn.exec_driver_sql("DELETE FROM baulk_migration WHERE name = ?", (MIGRATION,))
    path, token = tablet.path, tablet.token()
    tablet.close()
    tablet = TabletStore.open(path)  # the upgrade runs m0014 and its data step
    assert tablet.get(Find, missing.id).photo_hashes == [older.sha256]
    # the voided photo's hash goes; a hash no photo record names (set before photo records existed) stays
    assert tablet.get(Find, stale.id).photo_hashes == ["a" * 64]
    assert tablet.setting(AFTER_KEY + MIGRATION) is None
    before = _versions(tablet)
    tablet.close()
    tablet = TabletStore.open(path)  # recorded: it runs once
    assert _versions(tablet) == before
    client = SyncClient(tablet, http, token, batch_size=50)
    client.sync()
    assert server.get(Find, missing.id).photo_hashes == [older.sha256]
    assert server.get(Find, stale.id).photo_hashes == ["a" * 64]
    tablet.close()
