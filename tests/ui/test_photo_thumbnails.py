"""Thumbnails in a real window, driven by touches: the find list draws a thumbnail only for the rows on screen
(made once from the photo's file, then read from the thumbnail folder), and Record shows the newest photo of the
find being corrected as soon as it is kept, turned upright by its EXIF orientation (Pillow's ``exif_transpose``
is the reference)."""

from __future__ import annotations

import random
from pathlib import Path

import pytest
from PIL import Image, ImageOps

from mobile.photos import THUMB_PIXELS, photo_folder, save_photo
from schema.records import Photo
from tests.helpers import find_data
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui

PHOTOGRAPHED = 40


def _jpeg(path: Path, size: tuple[int, int], *, seed: int, orientation: int | None = None) -> Path:
    img = Image.frombytes("RGB", size, random.Random(seed).randbytes(size[0] * size[1] * 3))
    if orientation is not None:  # bands of colour, so a picture turned the wrong way shows
        w, h = size
        for i, colour in enumerate([(200, 30, 30), (30, 160, 30), (30, 30, 200)]):
            img.paste(colour, (i * w // 3, 0, (i + 1) * w // 3, h // 2))
    exif = Image.Exif()
    if orientation is not None:
        exif[0x0112] = orientation  # EXIF Orientation tag (EXIF 2.32, 4.6.4 A); 6 = turn 90 degrees clockwise to view
    img.save(path, format="JPEG", quality=85, exif=exif)
    return path


def test_thumbnails_in_the_find_list_and_on_record(tablet, demo_site, run_app, shots, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    store = d.app.store
    # forty photographed finds, then one without a photo (the newest, at the top of the list)
    photographed = []
    for i in range(PHOTOGRAPHED):
        found = store.save_find(find=find_data(demo_site, number=store.next_find_number(), e=1000.5 + i * 0.01))
        data = _jpeg(tmp_path / f"f{i}.jpg", (96, 64), seed=i).read_bytes()
        save_photo(store, data=data, subject="find", subject_id=found.id, site_id=demo_site.site.id, by="AK")
        photographed.append(found)
    bare = store.save_find(find=find_data(demo_site, number=store.next_find_number()))
    thumbs = photo_folder(store) / "thumbs"
    assert not thumbs.exists()  # nothing made before the list is drawn

    finds = d.nav("finds")
    d.pump(5)
    drawn = [w for w in finds.ids.rv.layout_manager.children if w.find_id]
    d.until(lambda: not any(w.waiting for w in drawn), what="the thumbnail worker to make the rows' thumbnails")
    assert drawn[0].parent is not None and len(drawn) < PHOTOGRAPHED  # the recycled list made views for the screen only
    drawn_hashes = {w.photo for w in drawn if w.photo}
    made = {p.name.split("-")[0] for p in thumbs.glob("*.png")}
    # only the rows on screen asked for a thumbnail: each made once, none for the rows below
    assert made == drawn_hashes and 0 < len(made) < PHOTOGRAPHED
    bare_row = next(w for w in drawn if w.find_id == bare.id.hex)
    assert bare_row.photo == "" and bare_row.thumb == ""
    for row in drawn:
        if row.photo:
            assert Path(row.thumb) == thumbs / f"{row.photo}-{THUMB_PIXELS}.png"
            with Image.open(row.thumb) as small:
                assert small.format == "PNG" and small.size == (96, 64)  # never enlarged
    d.screenshot(shots, "finds-thumbnails")

    # the bare find, opened for correction by touch, photographed sideways (EXIF orientation 6)
    d.tap(bare_row)
    d.tap(finds.ids.correct)
    rec = d.screen("record")
    assert d.app.root.ids.manager.current == "record" and rec.editing == bare.id.hex
    assert rec.photo_thumb == "" and rec.photo_line == ""
    sideways = _jpeg(tmp_path / "sideways.jpg", (600, 300), seed=99, orientation=6)
    d.tap(rec.ids.photo)
    d.type(rec.dialog.path, str(sideways))
    d.type(rec.dialog.caption, "in place before lifting")
    from mobile.ui.thumbs import thumbnails

    with thumbnails().held():  # the worker busy elsewhere: Record shows the line and a grey placeholder at once
        d.tap(rec.dialog.keep_button)
        assert rec.summary == f"Photo P{PHOTOGRAPHED + 1} of find {bare.number} kept.", rec.dialog.problem.text
        assert rec.photo_waiting and rec.photo_thumb == "" and rec.photo_line.startswith(f"P{PHOTOGRAPHED + 1} ")
        assert rec.ids.summary_thumb.width > 0 and rec.ids.summary_thumb.opacity == 1
        d.screenshot(shots, "record-thumbnail-waiting")
    d.until(lambda: not rec.photo_waiting, what="Record's thumbnail")
    (kept,) = [p for p in store.list(Photo) if p.subject_id == bare.id]
    assert rec.photo_thumb == str(thumbs / f"{kept.sha256}-{THUMB_PIXELS}.png")
    assert rec.photo_line.startswith(f"P{PHOTOGRAPHED + 1} · in place before lifting · AK ")
    with Image.open(sideways) as original:
        upright = ImageOps.exif_transpose(original)  # the reference: Pillow's own reading of the orientation
        assert upright.size == (300, 600)
    with Image.open(rec.photo_thumb) as small:
        assert small.size == (128, 256)  # upright, at most 256 a side
        # the same picture as Pillow's upright one, scaled: compare a coarse grid of mean colours
        reference = upright.convert("RGB").resize((4, 8), Image.Resampling.BOX)
        ours = small.convert("RGB").resize((4, 8), Image.Resampling.BOX)
        assert max(abs(a - b) for pa, pb in zip(reference.get_flattened_data(), ours.get_flattened_data()) for a, b in zip(pa, pb)) < 24
    assert rec.ids.photo_strip.height > 0 and rec.ids.photo_thumb.texture is not None
    bar = rec.ids.summary_thumb  # beside the summary line, above the buttons: in sight without scrolling
    assert bar.texture is not None and bar.width > 0 and 0 <= bar.to_window(*bar.center)[1] < d.window.height
    d.screenshot(shots, "record-thumbnail")
    rec.ids.scroll.scroll_to(rec.ids.photo_strip, padding=40, animate=False)  # the strip under the checks
    d.screenshot(shots, "record-photo-strip")

    # a new find: the strip goes; Finds now shows the photo on the bare find's row
    d.tap(rec.ids.new_find)
    assert rec.photo_thumb == "" and rec.ids.photo_strip.height == 0
    finds = d.nav("finds")
    d.pump(5)
    row = next(w for w in finds.ids.rv.layout_manager.children if w.find_id == bare.id.hex)
    d.until(lambda: not row.waiting, what="the row's thumbnail")
    assert row.photo == kept.sha256 and row.thumb == str(thumbs / f"{kept.sha256}-{THUMB_PIXELS}.png")
    d.screenshot(shots, "finds-thumbnail-kept")


def _plain_jpeg(path: Path, colour: tuple[int, int, int]) -> Path:
    Image.new("RGB", (120, 90), colour).save(path, format="JPEG", quality=95)
    return path


def _colour(i: int) -> tuple[int, int, int]:
    return (40 + i * 5, 230 - i * 5, (i * 53) % 200 + 30)  # a colour of its own for each find's photo


def test_thumbnails_are_made_off_the_ui_thread_and_land_on_their_own_rows(tablet, demo_site, run_app, shots,  # type: ignore[no-untyped-def]
                                                                          tmp_path: Path, monkeypatch) -> None:
    """While the thumbnail worker is held, the list draws with grey placeholders (nothing made on the UI
    thread) and is scrolled, so rows are bound to other finds; once let go, every row on screen gets the
    thumbnail of its own find's photo (checked by colour, read back by Pillow), made on the worker's thread,
    and the requests of rows bound to other finds meanwhile were dropped, not made."""
    import threading

    from mobile.controllers.find_list import FindListController
    from mobile.ui.thumbs import thumbnails

    threads: list[str] = []
    original = FindListController.thumbnail

    def spied(self, sha256: str) -> str:  # type: ignore[no-untyped-def]
        threads.append(threading.current_thread().name)
        return original(self, sha256)

    monkeypatch.setattr(FindListController, "thumbnail", spied)
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    store = d.app.store
    colour_of: dict[str, tuple[int, int, int]] = {}
    for i in range(PHOTOGRAPHED):
        found = store.save_find(find=find_data(demo_site, number=store.next_find_number(), e=1000.5 + i * 0.01))
        data = _plain_jpeg(tmp_path / f"c{i}.jpg", _colour(i)).read_bytes()
        save_photo(store, data=data, subject="find", subject_id=found.id, site_id=demo_site.site.id, by="AK")
        colour_of[found.id.hex] = _colour(i)
    thumbs = photo_folder(store) / "thumbs"
    worker = thumbnails()
    views = lambda: [w for w in finds.ids.rv.layout_manager.children if w.find_id]  # noqa: E731

    with worker.held():
        finds = d.nav("finds")
        d.pump(5)
        top = {w.find_id: w.photo for w in views()}
        assert top and all(w.waiting and w.thumb == "" for w in views())  # placeholders, nothing made
        assert not thumbs.exists() and threads == []
        d.screenshot(shots, "finds-thumbnails-waiting")
        finds.ids.rv.scroll_y = 0  # to the oldest finds: the same row widgets are bound to other finds
        d.pump(8)
        bottom = {w.find_id: w.photo for w in views()}
        assert set(bottom) - set(top) and all(w.waiting for w in views())
        assert worker.waiting() <= len(views())  # one small queue: the rows scrolled away dropped theirs
    d.until(lambda: not any(w.waiting for w in views()), what="the worker to make the thumbnails on screen")
    assert threads and set(threads) == {"baulk-thumbnails"}  # every thumbnail made on the worker's thread
    for row in views():
        assert row.thumb == str(thumbs / f"{row.photo}-{THUMB_PIXELS}.png")
        with Image.open(row.thumb) as small:  # Pillow reads it back: the colour of this row's own find
            r, g, b = small.convert("RGB").resize((1, 1), Image.Resampling.BOX).getpixel((0, 0))
        assert max(abs(x - y) for x, y in zip((r, g, b), colour_of[row.find_id])) <= 6, row.find_id
    made = {p.name.split("-")[0] for p in thumbs.glob("*.png")}
    gone = set(top.values()) - {w.photo for w in views()}
    assert made >= {w.photo for w in views()} and not made & gone  # rows scrolled away cost no decoding
    d.screenshot(shots, "finds-thumbnails-scrolled")
