"""A wrong photo voided and restored at camp (issue 19): ``baulk correct void-photo`` / ``restore-photo`` on a real
SQLite store, the Void / Restore forms of the Photos register over HTTP with a signed-in manager, and a tablet
that syncs afterwards holding both changes (the photo's ``voided`` and its find's ``photo_hashes``, one rule for
both sides: ``schema.photo_rules``).

The photos are taken on a tablet over a real loopback server (invented demo site VLM, tablet TAB-1): P1 a blurred
duplicate of find 1's photo P2."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import httpx
import pytest
from click.testing import CliRunner

from mobile.photos import save_photo, upload_photos
from schema.records import Find, Photo
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.loopback import serve_in_thread
from tests.helpers import find_data, seeded_server, synced_tablet
from tests.sync_server.test_photos import jpeg

FORM = {"content-type": "application/x-www-form-urlencoded"}


@pytest.fixture()
def camp(tmp_path: Path) -> Any:
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    app = create_app(store=server)
    with serve_in_thread(app) as base, httpx.Client(base_url=base, timeout=30) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        find = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        blurred, sharp = (save_photo(tablet, data=jpeg(seed=s), subject="find", subject_id=find.id,
                                     site_id=demo.site.id, by="AK", caption=c)
                          for s, c in ((31, "in place, blurred"), (32, "in place before lifting")))
        client.sync()
        upload_photos(tablet, http, tablet.token())
        yield {"server": server, "url": url, "http": http, "tablet": tablet, "client": client, "find": find,
               "blurred": blurred, "sharp": sharp}
        tablet.close()
    server.close()


def run(url: str, *args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, [*args, "--db", url])
    return result.exit_code, result.output


def test_void_and_restore_a_photo_by_command_and_the_tablet_pulls_both(camp: Any) -> None:
    server, tablet, find, blurred, sharp = (camp[k] for k in ("server", "tablet", "find", "blurred", "sharp"))
    assert (blurred.number, sharp.number) == (1, 2)
    assert server.get(Find, find.id).photo_hashes == [blurred.sha256, sharp.sha256]
    code, out = run(camp["url"], "correct", "void-photo", "TAB-1", "P1", "--reason", "blurred duplicate of P2",
                    "--by", "DM")
    assert (code, out) == (0, f"photo TAB-1-P1 (find {find.number}) voided: kept in the register, marked void; "
                              f"find {find.number} no longer lists its file\n"
                              "reason: blurred duplicate of P2 (camp, DM)\n")
    kept = server.get(Photo, blurred.id)
    assert (kept.voided, kept.void_reason) == (True, "blurred duplicate of P2 (camp, DM)")
    assert server.get(Find, find.id).photo_hashes == [sharp.sha256]
    camp["client"].sync()  # the tablet pulls the photo's version and the find's
    assert tablet.get(Photo, blurred.id).voided
    assert tablet.get(Find, find.id).photo_hashes == [sharp.sha256]

    code, out = run(camp["url"], "correct", "restore-photo", "TAB-1", "1", "--reason", "the only one with the scale",
                    "--by", "DM")
    assert (code, out) == (0, f"photo TAB-1-P1 (find {find.number}) restored: in force again; find {find.number} "
                              "lists its file again\nreason: restored (camp, DM): the only one with the scale\n")
    back = server.get(Photo, blurred.id)
    assert (back.voided, back.void_reason) == (False, "restored (camp, DM): the only one with the scale")
    assert server.get(Find, find.id).photo_hashes == [sharp.sha256, blurred.sha256]
    camp["client"].sync()
    assert not tablet.get(Photo, blurred.id).voided
    assert tablet.get(Find, find.id).photo_hashes == [sharp.sha256, blurred.sha256]


@pytest.mark.parametrize(("args", "message"), [
    (("TAB-1", "P1", "--reason", "no"),
     "Error: to void a photo give a reason: say why, e.g. 'a photo of find 1204, not this one'"),
    (("TAB-9", "P1", "--reason", "blurred"),
     "Error: no device is labelled 'TAB-9' (did you mean TAB-1?); the tablets that took photos at site VLM are: "
     "TAB-1 (baulk device list shows every label)"),
    (("TAB-1", "P7", "--reason", "blurred"),
     "Error: TAB-1 has no photo P7 at site VLM; its photos nearest that number are P1, P2"),
    (("TAB-1", "PX", "--reason", "blurred"),
     "Error: photo refused, nothing was saved. number: 'PX' is not a photo number. Fix: give the number the "
     "register shows after the tablet's label, e.g. P12 or 12"),
])
def test_a_refused_photo_void_names_the_fix_and_writes_nothing(camp: Any, args: tuple[str, ...], message: str) -> None:
    server = camp["server"]
    before = server.counts()
    code, out = run(camp["url"], "correct", "void-photo", *args, "--by", "DM")
    assert (code, out.strip()) == (1, message)
    assert server.counts() == before and not server.get(Photo, camp["blurred"].id).voided


def test_voiding_twice_or_restoring_a_photo_in_force_changes_nothing(camp: Any) -> None:
    url, blurred = camp["url"], camp["blurred"]
    code, out = run(url, "correct", "restore-photo", "TAB-1", "P1", "--reason", "why not", "--by", "DM")
    assert (code, out.strip()) == (1, "Error: photo TAB-1-P1 is already in force; nothing was restored")
    assert run(url, "correct", "void-photo", "TAB-1", "P1", "--reason", "blurred", "--by", "DM")[0] == 0
    code, out = run(url, "correct", "void-photo", "TAB-1", "p1", "--reason", "still blurred", "--by", "DM")
    assert (code, out.strip()) == (1, "Error: photo TAB-1-P1 is already voided (blurred (camp, DM)); nothing was voided")
    assert camp["server"].get(Photo, blurred.id).void_reason == "blurred (camp, DM)"


def _sign_in(http: httpx.Client, server: Any, role: str) -> str:
    token = server.add_device(label="MGR" if role == "manager" else "AN-1", role=role)[1]
    r = http.post("/camp/sign-in", content=f"token={token}", headers=FORM, follow_redirects=False)
    assert r.status_code == 303
    return re.search(r'name="csrf" value="([^"]+)"', http.get("/camp/").text).group(1)  # type: ignore[union-attr]


def test_the_photo_register_voids_and_restores_a_photo(camp: Any) -> None:
    server, http, find, blurred, sharp = (camp[k] for k in ("server", "http", "find", "blurred", "sharp"))
    csrf = _sign_in(http, server, "manager")
    page = http.get("/camp/photos").text
    assert f'action="/camp/photos/{blurred.id}/void"' in page and 'aria-label="void photo TAB-1-P1"' in page
    before = server.counts()
    r = http.post(f"/camp/photos/{blurred.id}/void", data={"csrf": csrf, "back": "/camp/photos", "reason": " ",
                                                           "by": "DM"}, follow_redirects=False)
    assert r.status_code == 400
    assert "to void a photo give a reason: say why, e.g. &#39;a photo of find 1204, not this one&#39;" in r.text
    assert f'<tr id="photo-{blurred.id}" class="error">' in r.text  # shown at the photo
    assert server.counts() == before and not server.get(Photo, blurred.id).voided

    r = http.post(f"/camp/photos/{blurred.id}/void", data={"csrf": csrf, "back": "/camp/photos", "by": "DM",
                                                           "reason": "blurred duplicate of P2"}, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"].startswith("/camp/photos?message=")
    page = http.get(r.headers["location"]).text
    assert (f"photo TAB-1-P1 (find {find.number}) voided: kept in the register, marked void. Why: blurred duplicate "
            "of P2 (camp, DM)") in page
    assert re.search(r'<del><strong class="num">TAB-1-P1</strong> &middot; find \d+</del> <strong>voided</strong>', page)
    assert "Why voided: blurred duplicate of P2 (camp, DM)" in page  # still in the register, marked
    assert f'action="/camp/photos/{blurred.id}/restore"' in page and f'action="/camp/photos/{sharp.id}/void"' in page
    assert server.get(Photo, blurred.id).voided and server.get(Find, find.id).photo_hashes == [sharp.sha256]
    on_find = http.get(f"/camp/finds/{find.id}").text  # the find's page lists it voided too, with Restore
    assert f'action="/camp/photos/{blurred.id}/restore"' in on_find

    r = http.post(f"/camp/photos/{blurred.id}/restore", data={"csrf": csrf, "back": f"/camp/finds/{find.id}",
                                                              "by": "DM", "reason": "the only one with the scale"},
                  follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == f"/camp/finds/{find.id}#photo-{blurred.id}"
    assert not server.get(Photo, blurred.id).voided
    assert server.get(Find, find.id).photo_hashes == [sharp.sha256, blurred.sha256]
    r = http.post(f"/camp/photos/{blurred.id}/void", data={"csrf": csrf, "back": "https://elsewhere.example/",
                                                           "by": "DM", "reason": "blurred"}, follow_redirects=False)
    assert r.headers["location"].startswith("/camp/photos?message=")  # never sent off the camp pages


def test_an_analyst_sees_the_register_but_cannot_void(camp: Any) -> None:
    server, http, blurred = camp["server"], camp["http"], camp["blurred"]
    csrf = _sign_in(http, server, "analyst")
    page = http.get("/camp/photos").text
    assert "TAB-1-P1" in page and "/void" not in page
    r = http.post(f"/camp/photos/{blurred.id}/void", data={"csrf": csrf, "reason": "not mine to void", "by": "AN"},
                  follow_redirects=False)
    assert r.status_code == 403 and not server.get(Photo, blurred.id).voided
