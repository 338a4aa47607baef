"""The Photo button of Units in a real window, driven by touches: a file that is not a picture is refused in
the dialog's own words, then a JPEG is kept with its caption, facing and scale (a screenshot of the dialog and of
the screen after are kept)."""

from __future__ import annotations

import random
from pathlib import Path

import pytest
from PIL import Image

from schema.records import Photo
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui


def test_a_unit_is_photographed_from_the_units_screen(tablet, run_app, shots, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    picture = tmp_path / "101-plan.jpg"
    Image.frombytes("RGB", (400, 300), random.Random(3).randbytes(400 * 300 * 3)).save(picture, quality=90)
    not_a_picture = tmp_path / "notes.jpg"
    not_a_picture.write_text("field notes, not a photo")
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    units = d.nav("units")
    d.choose(units.ids.chosen, "101")
    d.tap(units.ids.photo)
    dialog = units.dialog
    d.pump(5)
    assert dialog.title == "Photo of unit 101"
    d.type(dialog.path, str(not_a_picture))
    d.tap(dialog.keep_button)
    assert dialog.problem.text == ("PROBLEM: notes.jpg is not an image Baulk can read (no picture format Pillow knows); "
                                   "choose a JPEG or PNG photo")
    d.type(dialog.path, str(picture))
    assert dialog.problem.text == ""  # another file: the problem line is cleared
    d.type(dialog.caption, "101 surface in plan, cleaned")
    d.choose(dialog.facing, "down")
    d.tap(dialog.scale)
    d.screenshot(shots, "photo-dialog")
    d.tap(dialog.keep_button)
    d.pump(5)
    assert units.message == "Photo P1 of unit 101 kept (400 x 300 pixels).", (units.message, dialog.problem.text)
    d.screenshot(shots, "photo-kept")
    photos = d.app.store.list(Photo)
    assert [(p.number, p.subject, p.caption, p.facing, p.scale_in_frame, p.north_arrow_in_frame)
            for p in photos] == [(1, "unit", "101 surface in plan, cleaned", "down", True, False)]


def test_the_day_and_a_find_being_corrected_are_photographed(tablet, demo_site, run_app, shots, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    from tests.helpers import find_data

    picture = tmp_path / "day.jpg"
    Image.frombytes("RGB", (300, 200), random.Random(4).randbytes(300 * 200 * 3)).save(picture, quality=90)
    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    day = d.screen("day")
    d.tap(day.ids.photo_day)
    d.type(day.dialog.path, str(picture))
    d.tap(day.dialog.keep_button)
    assert day.message == "Photo P1 of the day in TR1 kept.", day.dialog.problem.text
    # a find opened for correction (as the Finds screen opens it), then its Photo button
    found = d.app.store.save_find(find=find_data(demo_site, number=d.app.store.next_find_number()))
    rec = d.nav("record")
    rec.load_find(str(found.id))
    d.pump(5)
    d.tap(rec.ids.photo)
    assert rec.dialog.title == f"Photo of find {found.number}"
    d.type(rec.dialog.path, str(picture))
    d.choose(rec.dialog.facing, "NE")
    d.tap(rec.dialog.keep_button)
    assert rec.summary == f"Photo P2 of find {found.number} kept.", rec.dialog.problem.text
    d.screenshot(shots, "photo-record")
    kept = {p.subject: p for p in d.app.store.list(Photo)}
    assert kept["day"].subject_id is None and kept["find"].subject_id == found.id and kept["find"].facing == "NE"


def test_a_wrong_photo_of_a_find_is_voided_on_record(tablet, demo_site, run_app, shots, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """Two photos of a find kept from Record; the newest (a wrong one) voided there with a reason: refused without
    one (naming the void, not the photo), then kept in the register marked void, its hash gone from the find's
    photo_hashes, and Record shows the find's other photo."""
    from schema.records import Find
    from tests.helpers import find_data

    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    found = d.app.store.save_find(find=find_data(demo_site, number=d.app.store.next_find_number()))
    rec = d.nav("record")
    rec.load_find(str(found.id))
    d.pump(5)
    for seed in (5, 6):
        picture = tmp_path / f"find-{seed}.jpg"
        Image.frombytes("RGB", (300, 200), random.Random(seed).randbytes(300 * 200 * 3)).save(picture, quality=90)
        d.tap(rec.ids.photo)
        d.type(rec.dialog.path, str(picture))
        if seed == 5:  # a caption longer than the register keeps: refused in the screens' words, nothing kept
            d.type(rec.dialog.caption, "c" * 501)
            d.tap(rec.dialog.keep_button)
            assert rec.dialog.problem.text.startswith("PROBLEM: photo refused, nothing was saved. Caption: "), \
                rec.dialog.problem.text
            assert d.app.store.list(Photo) == []
            d.type(rec.dialog.caption, "")
        d.tap(rec.dialog.keep_button)
        d.pump(5)  # the dialog closes before the next Photo tap
        assert rec.summary == f"Photo P{seed - 4} of find {found.number} kept.", rec.dialog.problem.text
    first, wrong = sorted(d.app.store.list(Photo, subject_id=found.id), key=lambda p: p.number)
    assert set(d.app.store.get(Find, found.id).photo_hashes) == {first.sha256, wrong.sha256}
    assert rec.ids.photo_void.text == "Void photo P2" and rec.photo_line.startswith("P2 · ")
    assert rec.photo_line.endswith(f"\n2 photos of find {found.number} (the newest shown)"), rec.photo_line
    d.tap(rec.ids.photo_void)  # no reason
    assert rec.problem == ("PROBLEM: void of photo P2 refused, nothing was saved. Reason: a void needs a reason. "
                           "Fix: say why the photo is voided (e.g. another find's photo)"), rec.problem
    assert not d.app.store.get(Photo, wrong.id).voided
    d.type(rec.ids.photo_void_reason, "shows the find beside it")
    d.screenshot(shots, "photo-void-record")
    d.tap(rec.ids.photo_void)
    assert rec.problem == "", rec.problem
    assert rec.summary == (f"Photo P2 of find {found.number} voided (shows the find beside it); it stays in the "
                           "photo register, marked void."), rec.summary
    voided = d.app.store.get(Photo, wrong.id)
    assert voided.voided and voided.void_reason == "shows the find beside it"
    assert d.app.store.get(Find, found.id).photo_hashes == [first.sha256]
    d.pump(5)
    assert rec.ids.photo_void.text == "Void photo P1" and rec.photo_line.startswith("P1 · ")
    assert rec.ids.photo_void_reason.text == ""
    d.screenshot(shots, "photo-voided-record")
