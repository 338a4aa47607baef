"""Photos from tablet to camp over a real loopback server: the register entry as versions, the file by the tus
protocol's semantics (tus 1.0.0, tus.io/protocols/resumable-upload: HEAD gives Upload-Offset, PATCH with
application/offset+octet-stream at the current offset answers 204 with the new offset, a wrong offset 409 without
touching the upload, another content type 415, another Tus-Resumable 412), resumed after a cut connection, a wrong
hash refused. Images are decoded by Pillow, the reference reader."""

from __future__ import annotations

import base64
import hashlib
import io
import random
import socket
import time
from pathlib import Path
from typing import Any

import httpx
import pytest
from PIL import Image

from mobile.photos import photo_folder, photo_path, save_photo, upload_photos
from schema.errors import NotAnImage
from schema.records import Photo
from sync_server.app import create_app
from sync_server.loopback import serve_in_thread
from tests.helpers import seeded_server, synced_tablet


def jpeg(width: int = 640, height: int = 480, seed: int = 1) -> bytes:
    """A noisy JPEG (noise does not compress: the file is big enough for several chunks)."""
    rnd = random.Random(seed)
    img = Image.frombytes("RGB", (width, height), rnd.randbytes(width * height * 3))
    out = io.BytesIO()
    img.save(out, format="JPEG", quality=95)
    return out.getvalue()


@pytest.fixture()
def camp(tmp_path: Path) -> Any:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    app = create_app(store=server)
    with serve_in_thread(app) as url, httpx.Client(base_url=url, timeout=30) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        yield server, demo, app, http, tablet, client
        tablet.close()
    server.close()


def _unit_photo(tablet: Any, demo: Any, data: bytes, **more: Any) -> Photo:
    unit = demo.units["101"]
    return save_photo(tablet, data=data, subject="unit", subject_id=unit.id, site_id=demo.site.id, by="AK",
                      trench_id=unit.trench_id, facing="N", scale_in_frame=True, **more)


def _tus(token: str, **more: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}", "Tus-Resumable": "1.0.0", **more}


def test_a_photo_travels_after_its_record_and_arrives_whole(camp: Any) -> None:
    server, demo, app, http, tablet, client = camp
    data = jpeg()
    photo = _unit_photo(tablet, demo, data, caption="101 surface in plan")
    again = _unit_photo(tablet, demo, jpeg(seed=2))
    assert (photo.number, again.number) == (1, 2)  # the tablet's own sequence
    client.sync()  # the records first
    assert server.get(Photo, photo.id).caption == "101 surface in plan"
    seen: list[tuple[Any, ...]] = []
    report = upload_photos(tablet, http, tablet.token(), chunk=64 * 1024, progress=lambda *a: seen.append(a))
    assert sorted(report.sent) == sorted([photo.sha256, again.sha256]) and report.held == 0
    kept = app.state.photos.path(photo.sha256)
    assert kept.read_bytes() == data and hashlib.sha256(kept.read_bytes()).hexdigest() == photo.sha256
    with Image.open(kept) as img:  # Pillow decodes what the camp kept
        assert img.size == (640, 480)
    assert seen[-1][1] == seen[-1][2] and all(s[1] <= s[2] for s in seen)  # per photo
    total = len(data) + again.bytes
    assert [s[4] for s in seen] == [total] * len(seen) and seen[-1][3] == total  # and in total
    assert [s[3] for s in seen] == sorted(s[3] for s in seen)
    # idempotent: nothing is sent twice
    second = upload_photos(tablet, http, tablet.token())
    assert second.sent == [] and second.held == 2 and second.bytes_sent == 0
    r = http.get(f"/v1/photos/files/{photo.sha256}", headers={"Authorization": f"Bearer {tablet.token()}"})
    assert r.status_code == 200 and r.content == data


def test_tus_answers_offsets_and_status_codes_as_the_specification_states(camp: Any) -> None:
    server, demo, _app, http, tablet, client = camp
    data = jpeg(seed=3)
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    token, sha, url = tablet.token(), photo.sha256, f"/v1/photos/uploads/{photo.sha256}"
    meta = f"sha256 {base64.b64encode(sha.encode()).decode()}"
    assert http.head(url, headers=_tus(token)).status_code == 404  # nothing begun
    r = http.post("/v1/photos/uploads", headers=_tus(token, **{"Upload-Length": str(len(data)),
                                                               "Upload-Metadata": meta}))
    assert r.status_code == 201 and r.headers["Location"] == url and r.headers["Tus-Resumable"] == "1.0.0"
    r = http.head(url, headers=_tus(token))
    assert (r.status_code, r.headers["Upload-Offset"], r.headers["Upload-Length"]) == (200, "0", str(len(data)))
    assert r.headers["Cache-Control"] == "no-store"  # tus: the HEAD answer must not be cached
    octet = {"Content-Type": "application/offset+octet-stream"}
    r = http.patch(url, content=data[:1000], headers=_tus(token, **{"Upload-Offset": "0"}, **octet))
    assert r.status_code == 204 and r.headers["Upload-Offset"] == "1000"
    r = http.patch(url, content=data[500:1500], headers=_tus(token, **{"Upload-Offset": "500"}, **octet))
    assert r.status_code == 409 and r.json()["code"] == "OffsetMismatch"
    assert "stands at byte 1000, not 500" in r.json()["message"]
    assert http.head(url, headers=_tus(token)).headers["Upload-Offset"] == "1000"  # left untouched
    r = http.patch(url, content=data[1000:], headers=_tus(token, **{"Upload-Offset": "1000",
                                                                    "Content-Type": "application/octet-stream"}))
    assert r.status_code == 415
    r = http.patch(url, content=data[1000:], headers={**_tus(token, **{"Upload-Offset": "1000"}, **octet),
                                                      "Tus-Resumable": "0.2.2"})
    assert r.status_code == 412 and r.headers["Tus-Version"] == "1.0.0"
    r = http.patch(url, content=data[1000:], headers=_tus(token, **{"Upload-Offset": "1000"}, **octet))
    assert r.status_code == 204 and r.headers["Upload-Offset"] == str(len(data))
    # the last chunk again (its answer lost): no harm, same answer
    r = http.patch(url, content=b"", headers=_tus(token, **{"Upload-Offset": str(len(data))}, **octet))
    assert r.status_code == 204 and r.headers["Upload-Offset"] == str(len(data))


def test_an_analyst_may_not_upload_and_a_hash_without_a_record_is_refused(camp: Any) -> None:
    server, _demo, _app, http, tablet, _client = camp
    analyst = server.add_device(label="AN-1", role="analyst")[1]
    sha = hashlib.sha256(b"x").hexdigest()
    meta = f"sha256 {base64.b64encode(sha.encode()).decode()}"
    r = http.post("/v1/photos/uploads", headers=_tus(analyst, **{"Upload-Length": "1", "Upload-Metadata": meta}))
    assert r.status_code == 403
    r = http.post("/v1/photos/uploads", headers=_tus(tablet.token(), **{"Upload-Length": "1",
                                                                        "Upload-Metadata": meta}))
    assert r.status_code == 404 and "push the tablet's versions before its photos" in r.json()["message"]


def test_bytes_that_do_not_match_the_hash_are_discarded(camp: Any) -> None:
    server, demo, app, http, tablet, client = camp
    data = jpeg(seed=4)
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    token, url = tablet.token(), f"/v1/photos/uploads/{photo.sha256}"
    meta = f"sha256 {base64.b64encode(photo.sha256.encode()).decode()}"
    http.post("/v1/photos/uploads", headers=_tus(token, **{"Upload-Length": str(len(data)), "Upload-Metadata": meta}))
    forged = bytes([data[0] ^ 1]) + data[1:]
    r = http.patch(url, content=forged, headers=_tus(token, **{"Upload-Offset": "0",
                                                              "Content-Type": "application/offset+octet-stream"}))
    assert r.status_code == 460 and r.json()["code"] == "UploadMismatch"
    assert "send the photo again from byte 0" in r.json()["message"]
    assert not app.state.photos.has(photo.sha256)
    assert http.head(url, headers=_tus(token)).status_code == 404  # nothing half-kept
    assert upload_photos(tablet, http, token).sent == [photo.sha256]  # the true bytes go through
    assert app.state.photos.path(photo.sha256).read_bytes() == data


def _cut_patch(base_url: str, token: str, sha: str, body: bytes, sent: int) -> None:
    """A PATCH announcing the whole body whose connection dies after ``sent`` bytes (a tablet leaving Wi-Fi)."""
    host, port = base_url.removeprefix("http://").split(":")
    head = (f"PATCH /v1/photos/uploads/{sha} HTTP/1.1\r\nHost: {host}\r\nAuthorization: Bearer {token}\r\n"
            f"Tus-Resumable: 1.0.0\r\nUpload-Offset: 0\r\nContent-Type: application/offset+octet-stream\r\n"
            f"Content-Length: {len(body)}\r\n\r\n").encode()
    with socket.create_connection((host, int(port))) as s:
        s.sendall(head + body[:sent])
        time.sleep(0.2)
        s.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, b"\x01\x00\x00\x00\x00\x00\x00\x00")  # RST on close


def test_an_upload_cut_at_90_percent_resumes_with_the_rest(camp: Any) -> None:
    server, demo, app, http, tablet, client = camp
    data = jpeg(1200, 900, seed=5)
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    token, url = tablet.token(), f"/v1/photos/uploads/{photo.sha256}"
    meta = f"sha256 {base64.b64encode(photo.sha256.encode()).decode()}"
    http.post("/v1/photos/uploads", headers=_tus(token, **{"Upload-Length": str(len(data)), "Upload-Metadata": meta}))
    cut = len(data) * 9 // 10
    _cut_patch(str(http.base_url).rstrip("/"), token, photo.sha256, data, cut)
    deadline = time.monotonic() + 10
    while int(http.head(url, headers=_tus(token)).headers["Upload-Offset"]) < cut:
        assert time.monotonic() < deadline, "the server did not keep the bytes of the cut request"
        time.sleep(0.05)
    assert int(http.head(url, headers=_tus(token)).headers["Upload-Offset"]) == cut
    chunk = 64 * 1024
    report = upload_photos(tablet, http, token, chunk=chunk)
    assert report.sent == [photo.sha256]
    assert report.bytes_sent <= len(data) - cut + chunk  # the missing 10 % (plus at most one chunk)
    assert report.bytes_sent == len(data) - cut
    assert app.state.photos.path(photo.sha256).read_bytes() == data


def test_the_tablet_refuses_what_is_not_a_whole_image(camp: Any) -> None:
    _server, demo, _app, _http, tablet, _client = camp
    with pytest.raises(NotAnImage, match="is not an image Baulk can read"):
        _unit_photo(tablet, demo, b"%PDF-1.4 not a photo")
    data = jpeg(seed=6)
    with pytest.raises(NotAnImage, match="is not a whole image"):
        _unit_photo(tablet, demo, data[: len(data) // 2])  # a JPEG cut short
    assert tablet.count(Photo) == 0 and tablet.setting("photo_seq") is None


def test_the_file_is_on_disk_before_its_record(camp: Any) -> None:
    _server, demo, _app, _http, tablet, _client = camp
    data = jpeg(seed=7)
    photo = _unit_photo(tablet, demo, data)
    from mobile.photos import orphans, photo_folder

    kept = photo_path(photo_folder(tablet), photo.sha256)
    assert kept.read_bytes() == data
    assert not list(kept.parent.glob(".*.tmp"))  # the temporary name is gone
    assert orphans(tablet) == []


def _sign_in(http: httpx.Client, token: str) -> None:
    r = http.post("/camp/sign-in", content=f"token={token}",
                  headers={"content-type": "application/x-www-form-urlencoded"}, follow_redirects=False)
    assert r.status_code == 303, r.text


def test_the_camp_pages_show_a_finds_photos_and_the_register(camp: Any) -> None:
    from tests.helpers import find_data

    server, demo, app, http, tablet, client = camp
    saved = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    data = jpeg(seed=8)
    photo = save_photo(tablet, data=data, subject="find", subject_id=saved.id, site_id=demo.site.id, by="AK",
                       caption="in place before lifting", facing="NE", scale_in_frame=True)
    pending = _unit_photo(tablet, demo, jpeg(seed=9))
    client.sync()
    upload_photos(tablet, http, tablet.token())
    (app.state.photos.path(pending.sha256)).unlink()  # as if its tablet had not sent it yet
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get(f"/camp/finds/{saved.id}")
    assert page.status_code == 200
    assert f'src="/camp/photos/{photo.sha256}/thumb.png"' in page.text and "in place before lifting" in page.text
    assert "TAB-1-P1" in page.text
    thumb = http.get(f"/camp/photos/{photo.sha256}/thumb.png")
    with Image.open(io.BytesIO(thumb.content)) as img:  # Pillow reads the thumbnail the page shows
        assert img.format == "PNG" and max(img.size) == 320
    full = http.get(f"/camp/photos/{photo.sha256}")
    assert full.headers["content-type"] == "image/jpeg" and full.content == data
    register = http.get("/camp/photos", params={"trench": "TR1"})
    assert register.text.count('class="num">TAB-1-P') == 2 and "not yet received" in register.text
    assert "unit 101" in register.text and "find " in register.text
    assert http.get("/camp/photos", params={"by": "ZZ"}).text.count('class="num">TAB-1-P') == 0
    assert http.get(f"/camp/photos/{pending.sha256}").status_code == 404

    # possible human remains: an analyst sees the register row, not the picture (as with their positions)
    remains = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), human_remains=True))
    hidden = save_photo(tablet, data=jpeg(seed=10), subject="find", subject_id=remains.id, site_id=demo.site.id,
                        by="AK")
    client.sync()
    upload_photos(tablet, http, tablet.token())
    assert f"/camp/photos/{hidden.sha256}/thumb.png" in http.get(f"/camp/finds/{remains.id}").text  # the manager
    http.post("/camp/sign-out", follow_redirects=False)
    http.cookies.clear()
    analyst = server.add_device(label="AN-1", role="analyst")[1]
    _sign_in(http, analyst)
    page = http.get(f"/camp/finds/{remains.id}").text
    assert "withheld: possible human remains" in page and f"/camp/photos/{hidden.sha256}" not in page
    assert http.get(f"/camp/photos/{hidden.sha256}/thumb.png").status_code == 404
    assert http.get(f"/camp/photos/{photo.sha256}/thumb.png").status_code == 200  # other photos are shown
    auth = {"Authorization": f"Bearer {analyst}"}
    assert http.get(f"/v1/photos/files/{hidden.sha256}", headers=auth).status_code == 404
    assert http.get(f"/v1/photos/files/{photo.sha256}", headers=auth).content == data


def test_the_export_carries_the_register_and_the_files(camp: Any, tmp_path: Path) -> None:
    import json
    import zipfile

    import pandas as pd
    from frictionless import Package

    from sync_server.exports import export_zip, run_export
    from tests.helpers import find_data

    server, demo, _app, http, tablet, client = camp
    saved = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    remains = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), human_remains=True))
    data = jpeg(seed=12)
    of_find = save_photo(tablet, data=data, subject="find", subject_id=saved.id, site_id=demo.site.id, by="AK",
                         facing="E")
    of_unit = _unit_photo(tablet, demo, jpeg(seed=13), caption="section, east face")
    of_remains = save_photo(tablet, data=jpeg(seed=14), subject="find", subject_id=remains.id,
                            site_id=demo.site.id, by="AK")
    client.sync()
    upload_photos(tablet, http, tablet.token())
    manifest = run_export(server, tmp_path / "out")
    out = tmp_path / "out"
    table = pd.read_csv(out / "photo_register.csv", dtype=str, keep_default_na=False)  # pandas, reference reader
    assert list(table["photo"]) == ["TAB-1-P1", "TAB-1-P2", "TAB-1-P3"]
    rows = table.set_index("photo")
    assert rows.loc["TAB-1-P1", "file"] == "photos/find-1_TAB-1-P1.jpg"
    assert rows.loc["TAB-1-P1", "find"] == str(saved.id) and rows.loc["TAB-1-P1", "facing"] == "E"
    assert rows.loc["TAB-1-P2", "file"] == "photos/unit-101_TAB-1-P2.jpg" and rows.loc["TAB-1-P2", "unit"] == "101"
    assert (rows.loc["TAB-1-P3", "file"], rows.loc["TAB-1-P3", "withheld"]) == ("", "true")  # human remains
    assert (out / "photos" / "find-1_TAB-1-P1.jpg").read_bytes() == data
    assert sorted(p.name for p in (out / "photos").iterdir()) == ["find-1_TAB-1-P1.jpg", "unit-101_TAB-1-P2.jpg"]
    assert manifest["files"]["photos/find-1_TAB-1-P1.jpg"]["sha256"] == of_find.sha256
    assert of_unit.sha256 in {f["sha256"] for f in manifest["files"].values()}
    assert of_remains.sha256 not in {f["sha256"] for f in manifest["files"].values()}
    report = Package(json.loads((out / "datapackage.json").read_text()), basepath=str(out)).validate()
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])  # frictionless, reference validator
    archive = export_zip(server, tmp_path / "zip")
    with zipfile.ZipFile(archive) as z:
        assert z.read("baulk-export/photos/find-1_TAB-1-P1.jpg") == data


def test_the_camp_link_sends_photos_after_the_versions_with_progress(camp: Any) -> None:
    from mobile.controllers.link import CampLink

    server, demo, app, http, tablet, _client = camp
    tablet.set_setting("link.server", str(http.base_url).rstrip("/"))
    link = CampLink(tablet, client_factory=lambda url, _verify: httpx.Client(base_url=url, timeout=30))
    photo = _unit_photo(tablet, demo, jpeg(seed=15))  # its record is not at camp yet: the same sync sends both
    stages: list[tuple[str, int, int]] = []
    link.sync(lambda stage, done, total: stages.append((stage, done, total)))
    assert app.state.photos.path(photo.sha256).read_bytes() == photo_path(photo_folder(tablet), photo.sha256).read_bytes()
    assert ("photos", photo.bytes, photo.bytes) in stages
    assert stages.index(("photos", photo.bytes, photo.bytes)) > max(i for i, s in enumerate(stages) if s[0] == "push")
    lines = link.status().lines()
    assert f"Last photo upload: photos: 1 sent ({photo.bytes / 1e6:.1f} MB), 0 held already" in lines, lines
    assert any(l.startswith("Free space for photos: ") for l in lines)


def test_a_usb_bundle_carries_the_photos_the_camp_lacks(tmp_path: Path) -> None:
    """``baulk bundle export`` writes the photo pack beside the bundle; ``baulk bundle import`` keeps each photo
    after its hash and image checks (a changed file is refused and named; the others are kept)."""
    import zipfile

    from click.testing import CliRunner

    from sync_server.cli import cli
    from sync_server.photos import default_photo_dir
    from tests.helpers import enrolled_tablet

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, _token = enrolled_tablet(server, tmp_path / "TAB-U.sqlite", "TAB-U")
    for record in demo.setup_records():  # the set-up, as a first return bundle or sync would bring it
        tablet.put(record)
    good = _unit_photo(tablet, demo, jpeg(seed=21))
    bad = _unit_photo(tablet, demo, jpeg(seed=22))
    tablet.close()
    stick = tmp_path / "stick"
    stick.mkdir()
    run = CliRunner().invoke(cli, ["bundle", "export", "--store", str(tmp_path / "TAB-U.sqlite"), "--out",
                                   str(stick / "b.baulkbundle")])
    assert run.exit_code == 0, run.output
    assert "b.baulkbundle.photos.zip: 2 photos" in run.output
    pack = stick / "b.baulkbundle.photos.zip"
    with zipfile.ZipFile(pack) as z:  # change one photo's bytes in the pack (same length, same name)
        entries = {i.filename: z.read(i) for i in z.infolist()}
    assert set(entries) == {good.sha256, bad.sha256}
    entries[bad.sha256] = entries[bad.sha256][:-3] + b"\x00\x00\x00"
    with zipfile.ZipFile(pack, "w") as z:
        for name, data in entries.items():
            z.writestr(name, data)
    run = CliRunner().invoke(cli, ["bundle", "import", str(stick / "b.baulkbundle"), "--db", server.url])
    assert run.exit_code == 0, run.output
    assert "photos: 1 kept, 0 held already, 1 refused:" in run.output
    assert f"refused photo {bad.sha256}: the bytes received hash to " in run.output
    vault = default_photo_dir(server.url)
    assert (vault / good.sha256[:2] / good.sha256).read_bytes() == entries[good.sha256]
    assert not (vault / bad.sha256[:2] / bad.sha256).exists()
    run = CliRunner().invoke(cli, ["bundle", "import", str(stick / "b.baulkbundle"), "--db", server.url])
    assert "photos: 0 kept, 1 held already, 1 refused:" in run.output  # again: nothing twice
    server.close()
