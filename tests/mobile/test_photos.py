"""Photos on the tablet through the Photo controller: kept by hash, numbered by the tablet's own sequence,
location tags gone from photos of possible human remains (EXIF read back by Pillow, the reference reader)."""

from __future__ import annotations

import hashlib
import uuid
import random
from pathlib import Path
from typing import Any

import pytest
from PIL import Image

from mobile.controllers.photos import PhotoController
from mobile.photos import photo_folder, photo_path
from schema.demo_site import build_site
from schema.errors import ImageTooLarge, RecordInvalid
from schema.records import Find, Photo
from tests.helpers import demo_tablet, find_data, start_field_day

GPS_IFD = 0x8825  # EXIF 2.32, table 4: the pointer to the GPS directory (from memory)


def picture(tmp: Path, name: str = "p.jpg", *, gps: bool = False, seed: int = 1, size: tuple[int, int] = (320, 240)) -> Path:
    img = Image.frombytes("RGB", size, random.Random(seed).randbytes(size[0] * size[1] * 3))
    exif = Image.Exif()
    exif[0x0110] = "field camera"  # Model
    if gps:
        ifd = exif.get_ifd(GPS_IFD)
        ifd[1], ifd[2], ifd[3], ifd[4] = "S", (2.0, 45.0, 10.5), "E", (36.0, 5.0, 20.25)
    path = tmp / name
    img.save(path, format="JPEG", quality=90, exif=exif)
    return path


@pytest.fixture()
def day(tmp_path: Path) -> Any:
    demo = build_site()
    store = demo_tablet(tmp_path / "tab.sqlite", demo)
    days, _truth = start_field_day(store, demo)
    yield demo, store, days, PhotoController(days)
    store.close()


def test_photos_of_the_unit_and_the_day_are_numbered_in_the_tablets_sequence(day: Any, tmp_path: Path) -> None:
    demo, store, _days, photos = day
    source = picture(tmp_path)
    first = photos.keep(photos.of_unit(), source, caption="101 in plan", facing="down", scale=True, north_arrow=True)
    second = photos.keep(photos.of_day(), picture(tmp_path, "q.jpg", seed=2))
    assert (first.number, second.number) == (1, 2)
    assert (first.subject, first.subject_id, first.facing, first.by) == ("unit", demo.units["101"].id, "down", "AK")
    assert (second.subject, second.subject_id) == ("day", None)
    assert (first.width_px, first.height_px, first.bytes) == (320, 240, source.stat().st_size)
    kept = photos.file(first)
    assert kept == photo_path(photo_folder(store), first.sha256) and kept.read_bytes() == source.read_bytes()
    assert hashlib.sha256(kept.read_bytes()).hexdigest() == first.sha256
    assert [p.id for p in photos.photos_of(demo.units["101"].id)] == [first.id]
    assert photos.line(first).startswith("P1 · 101 in plan · facing down · AK ")
    with Image.open(photos.thumbnail(first)) as thumb:
        assert max(thumb.size) == 256 and thumb.format == "PNG"
    assert store.get(Photo, first.id) == first


def test_location_tags_are_stripped_from_photos_of_possible_human_remains(day: Any, tmp_path: Path) -> None:
    demo, store, _days, photos = day
    source = picture(tmp_path, gps=True)
    with Image.open(source) as img:  # the control: Pillow reads the location in the original
        assert img.getexif().get_ifd(GPS_IFD)[1] == "S"
    plain = store.save_find(find=find_data(demo, number=1))
    remains = store.save_find(find=find_data(demo, number=2, human_remains=True))
    kept_plain = photos.keep(photos.of_find(plain.id, 1), source)
    kept_remains = photos.keep(photos.of_find(remains.id, 2), source)
    with Image.open(photos.file(kept_plain)) as img:
        assert GPS_IFD in img.getexif()  # other photos keep their tags
    with Image.open(photos.file(kept_remains)) as img:
        exif = img.getexif()
        assert GPS_IFD not in exif and exif.get_ifd(GPS_IFD) == {}
        assert exif[0x0110] == "field camera"  # the rest of the EXIF stays
        assert img.size == (320, 240)
    assert kept_remains.sha256 != kept_plain.sha256  # the stripped file is another file, named by its own hash


def test_bad_pictures_are_refused_with_the_fix_and_nothing_is_kept(day: Any, tmp_path: Path) -> None:
    _demo, store, days, photos = day
    text = tmp_path / "notes.jpg"
    text.write_text("not a photo")
    with pytest.raises(Exception, match="notes.jpg is not an image Baulk can read.*choose a JPEG or PNG photo"):
        photos.keep(photos.of_unit(), text)
    huge = tmp_path / "huge.png"
    Image.new("1", (20000, 10000)).save(huge)  # 200 megapixels (a small file: one bit a pixel, compressed)
    with pytest.raises(ImageTooLarge, match="huge.png has more than 120 megapixels \\(Image size \\(200000000 pixels\\)"):
        photos.keep(photos.of_unit(), huge)
    with pytest.raises(RecordInvalid, match="facing"):
        photos.keep(photos.of_unit(), picture(tmp_path), facing="up")
    assert store.count(Photo) == 0
    assert not any(p.is_file() for p in photo_folder(store).rglob("*"))
    days.require_day().unit = None
    with pytest.raises(RecordInvalid, match="no unit is chosen.*choose the unit under Units or Day"):
        photos.of_unit()


def test_free_space_is_shown(day: Any) -> None:
    photos = day[3]
    assert photos.free_space_line().startswith("Free space for photos: ")


def test_a_failure_between_file_and_record_leaves_a_whole_file_and_no_record(day: Any, tmp_path: Path,
                                                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """The order that makes a power cut harmless: the file is durable before the record's transaction begins,
    so a cut in between leaves a file no record names (listed by ``orphans``), never a record without its file."""
    from mobile.photos import orphans

    _demo, store, _days, photos = day
    source = picture(tmp_path, seed=9)
    seen: list[bool] = []

    def cut(conn: Any, record: Any, *, new: bool) -> None:
        seen.append(photo_path(photo_folder(store), record.sha256).read_bytes() == source.read_bytes())
        raise OSError("power cut")

    monkeypatch.setattr(store, "save_versioned", cut)
    with pytest.raises(OSError, match="power cut"):
        photos.keep(photos.of_unit(), source)
    assert seen == [True]  # the whole file was in place when the record was being written
    monkeypatch.undo()
    assert store.count(Photo) == 0 and store.setting("photo_seq") is None  # the transaction left nothing
    assert [p.read_bytes() for p in orphans(store)] == [source.read_bytes()]
    again = photos.keep(photos.of_unit(), source)  # taking it again reuses the file and numbers it 1
    assert again.number == 1 and orphans(store) == []


def test_the_find_list_names_each_finds_newest_kept_photo_and_its_thumbnail(day: Any, tmp_path: Path) -> None:
    """A row carries the hash of its find's newest photo that is not voided; its thumbnail is made from the file
    the first time it is asked for and read back after; a photo whose file is on another tablet has none."""
    import datetime as dt

    from mobile.controllers.find_list import FindListController
    from mobile.photos import THUMB_PIXELS

    demo, store, _days, photos = day
    listing = FindListController(store)
    plain = store.save_find(find=find_data(demo, number=1))
    shot = store.save_find(find=find_data(demo, number=2))
    older = photos.keep(photos.of_find(shot.id, 2), picture(tmp_path, "a.jpg", seed=21))
    newer = photos.keep(photos.of_find(shot.id, 2), picture(tmp_path, "b.jpg", seed=22, size=(200, 300)))
    assert newer.taken_at >= older.taken_at
    rows = {r["number"]: r for r in listing.rows()}
    assert (rows[1]["photo"], rows[2]["photo"]) == ("", newer.sha256)
    assert photos.newest(shot.id) == (newer, photo_folder(store) / "thumbs" / f"{newer.sha256}-{THUMB_PIXELS}.png")
    assert photos.newest(plain.id) is None

    thumb = Path(listing.thumbnail(newer.sha256))
    with Image.open(thumb) as small:  # Pillow decodes the thumbnail: the picture's shape, no side over 256
        assert small.format == "PNG" and small.size == (171, 256)  # 200 x 300 scaled by 256/300, 170.7 rounded
    made = thumb.stat().st_mtime_ns
    assert listing.thumbnail(newer.sha256) == str(thumb) and thumb.stat().st_mtime_ns == made  # made once
    assert listing.thumbnail("") == ""

    with store.atomic() as conn:  # the newer photo voided (blurred): the list falls back to the older one
        store.save_versioned(conn, newer.model_copy(update={"voided": True, "void_reason": "blurred"}), new=False)
    assert {r["number"]: r["photo"] for r in listing.rows()}[2] == older.sha256

    # a photo record that came from another tablet: its file is not here, so no thumbnail (and no error)
    elsewhere = Photo.model_validate({**older.model_dump(), "id": uuid.uuid4(), "sha256": "ab" * 32, "number": 7,
                                      "taken_at": older.taken_at + dt.timedelta(minutes=5)})
    with store.atomic() as conn:
        store.save_versioned(conn, elsewhere, new=True)
    assert {r["number"]: r["photo"] for r in listing.rows()}[2] == "ab" * 32
    assert listing.thumbnail("ab" * 32) == ""
    assert photos.newest(shot.id) == (elsewhere, None)


def test_a_thumbnail_is_upright_by_the_exif_orientation(day: Any, tmp_path: Path) -> None:
    """Pillow's ``ImageOps.exif_transpose`` is the reference for what upright means (EXIF 2.32, Orientation tag)."""
    from PIL import ImageOps

    _demo, store, _days, photos = day
    img = Image.new("RGB", (400, 100), (240, 240, 240))
    img.paste((200, 20, 20), (0, 0, 100, 100))  # a red square at the left end
    exif = Image.Exif()
    exif[0x0112] = 8  # rotate 90 degrees counter-clockwise to view
    source = tmp_path / "turned.jpg"
    img.save(source, format="JPEG", quality=95, exif=exif)
    kept = photos.keep(photos.of_unit(), source)
    with Image.open(source) as original:
        upright = ImageOps.exif_transpose(original).convert("RGB")
    with Image.open(photos.thumbnail(kept)) as small:
        small = small.convert("RGB")
        assert small.size == (64, 256) and upright.size == (100, 400)
        ours = small.resize((1, 4), Image.Resampling.BOX).get_flattened_data()
        reference = upright.resize((1, 4), Image.Resampling.BOX).get_flattened_data()
        assert max(abs(a - b) for pa, pb in zip(ours, reference) for a, b in zip(pa, pb)) < 12
        assert ours[3][0] > 150 and ours[3][1] < 80  # orientation 8: the left end comes to the bottom


def test_a_photo_of_a_find_adds_its_hash_to_the_finds_photo_hashes_once(day: Any, tmp_path: Path) -> None:
    """``Find.photo_hashes`` (read by exports and sync) follows the photo records: each new hash is one 'add'
    version of the set field, written in the photo record's transaction; the same picture again adds nothing."""
    from schema.sync.replica import record_versions

    demo, store, _days, photos = day
    found = store.save_find(find=find_data(demo, number=1))
    first = photos.keep(photos.of_find(found.id, 1), picture(tmp_path, "a.jpg", seed=31))
    second = photos.keep(photos.of_find(found.id, 1), picture(tmp_path, "b.jpg", seed=32))
    again = photos.keep(photos.of_find(found.id, 1), picture(tmp_path, "a.jpg", seed=31))  # the same file twice
    assert again.sha256 == first.sha256 and again.number == 3
    assert store.get(Find, found.id).photo_hashes == [first.sha256, second.sha256]
    with store.read() as conn:
        adds = [v.value for v in record_versions(conn, [found.id]) if v.field == "photo_hashes"]
    assert adds == [{"op": "add", "item": first.sha256}, {"op": "add", "item": second.sha256}]
    photos.keep(photos.of_unit(), picture(tmp_path, "c.jpg", seed=33))  # a unit's photo touches no find
    assert store.get(Find, found.id).photo_hashes == [first.sha256, second.sha256]
