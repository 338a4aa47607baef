"""The camp server's side of a photo upload through HTTP on a real loopback server: a photo that fits one chunk
travels in the creation request (the tus 1.0.0 "Creation With Upload" extension, tus.io/protocols/resumable-upload:
201 with the Upload-Offset the server kept), and what is not a whole image is refused with 422 and a message that
names the photo, nothing kept and no upload left to resume. The image check reads the header and the file's
structure only; Pillow's full decode (the reference reader) is the yardstick it must not be laxer than."""

from __future__ import annotations

import base64
import hashlib
import io
import random
import struct
import uuid
import zlib
from pathlib import Path
from typing import Any

import httpx
import pytest
from PIL import Image

from mobile.photos import upload_photos
from schema.errors import NotAnImage
from schema.records import Photo
from sync_server.photos import check_image
from tests.sync_server.test_photos import _unit_photo, camp, jpeg  # noqa: F401 (camp: the same camp fixture)


def _tus(token: str, **more: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}", "Tus-Resumable": "1.0.0", **more}


def _create(http: httpx.Client, token: str, data: bytes, *, body: bool = True) -> httpx.Response:
    sha = hashlib.sha256(data).hexdigest()
    meta = f"sha256 {base64.b64encode(sha.encode()).decode()}"
    extra = {"Content-Type": "application/offset+octet-stream"} if body else {}
    return http.post("/v1/photos/uploads", content=data if body else b"", headers=_tus(
        token, **{"Upload-Length": str(len(data)), "Upload-Metadata": meta}, **extra))


def _record_for(server: Any, template: Photo, data: bytes) -> str:
    """A photo record at camp naming these bytes (as a tablet that did not check them would push it)."""
    sha = hashlib.sha256(data).hexdigest()
    server.add(template.model_copy(update={"id": uuid.uuid4(), "sha256": sha, "bytes": len(data),
                                           "number": template.number + 100}))
    return sha


def _huge_png() -> bytes:
    """A PNG whose header says 20,000 x 10,000 pixels (200 megapixels) around a tiny picture: the IHDR is
    rewritten with its CRC (PNG specification, 11.2.2 and 5.5: CRC-32 over the chunk type and data)."""
    out = io.BytesIO()
    Image.new("RGB", (8, 8), "olive").save(out, format="PNG")
    data = bytearray(out.getvalue())
    ihdr = bytes(data[12:16]) + struct.pack(">II", 20_000, 10_000) + bytes(data[24:29])
    data[16:24] = struct.pack(">II", 20_000, 10_000)
    data[29:33] = struct.pack(">I", zlib.crc32(ihdr))
    return bytes(data)


def test_a_photo_that_fits_one_chunk_travels_with_its_creation_request(camp: Any) -> None:
    server, demo, app, http, tablet, client = camp
    data = jpeg(seed=31)
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    r = _create(http, tablet.token(), data)
    assert r.status_code == 201 and r.headers["Upload-Offset"] == str(len(data))  # tus: the bytes kept
    assert r.headers["Location"] == f"/v1/photos/uploads/{photo.sha256}"
    assert app.state.photos.path(photo.sha256).read_bytes() == data
    with Image.open(app.state.photos.path(photo.sha256)) as img:  # Pillow decodes what the camp kept
        img.load()
        assert img.size == (640, 480)
    r = _create(http, tablet.token(), data)  # again (its answer lost): nothing written twice, the same answer
    assert r.status_code == 201 and r.headers["Upload-Offset"] == str(len(data))
    report = upload_photos(tablet, http, tablet.token())
    assert report.sent == [] and report.bytes_sent == 0 and report.held == 1


def test_a_kept_photo_leaves_the_page_cache(camp: Any) -> None:
    """Once on the disk, a received photo's bytes are dropped from the system's page cache (a season of photos
    would otherwise push out the camp database's pages); only what the image check read back stays. Measured
    from outside by util-linux ``fincore`` (mincore(2): the file's pages resident in memory)."""
    import shutil
    import subprocess

    if shutil.which("fincore") is None:
        pytest.skip("util-linux fincore is not installed")
    server, demo, app, http, tablet, client = camp
    data = jpeg(1600, 1200, seed=35)  # noise at quality 95: some 2.5 MB
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    assert _create(http, tablet.token(), data).status_code == 201
    kept = app.state.photos.path(photo.sha256)
    resident = int(subprocess.run(["fincore", "--bytes", "--noheadings", "--output", "RES", str(kept)],
                                  capture_output=True, text=True, check=True).stdout.split()[0])
    assert kept.stat().st_size == len(data) > 2_000_000
    assert resident <= len(data) // 4, f"{resident} of {len(data)} bytes still cached"


@pytest.mark.parametrize("what, make, code, words", [
    ("not an image", lambda: b"%PDF-1.4 a scanned form, not a photo " * 100, "NotAnImage",
     "is not an image Baulk can read"),
    ("a JPEG cut at 90 %", lambda: jpeg(seed=32)[: len(jpeg(seed=32)) * 9 // 10], "NotAnImage",
     "is not a whole image"),
    ("a JPEG without its last two bytes", lambda: jpeg(seed=33)[:-2], "NotAnImage", "is not a whole image"),
    ("a PNG cut short", lambda: _png()[:-20], "NotAnImage", "is not a whole image"),
    ("a 200-megapixel image", _huge_png, "ImageTooLarge", "more than 120 megapixels"),
])
def test_the_camp_refuses_what_is_not_a_whole_photo(camp: Any, what: str, make: Any, code: str, words: str) -> None:
    server, demo, app, http, tablet, client = camp
    template = _unit_photo(tablet, demo, jpeg(seed=34))
    client.sync()
    data = make()
    sha = _record_for(server, server.get(Photo, template.id), data)
    r = _create(http, tablet.token(), data)
    assert r.status_code == 422, (what, r.text)
    assert r.json()["code"] == code and words in r.json()["message"] and sha in r.json()["message"]
    assert not app.state.photos.has(sha)  # nothing kept, nothing half-kept to resume
    assert http.head(f"/v1/photos/uploads/{sha}", headers=_tus(tablet.token())).status_code == 404


def _png() -> bytes:
    out = io.BytesIO()
    Image.frombytes("RGB", (300, 200), random.Random(7).randbytes(300 * 200 * 3)).save(out, format="PNG")
    return out.getvalue()


def _progressive_jpeg() -> bytes:
    out = io.BytesIO()
    Image.open(io.BytesIO(jpeg(320, 240, seed=35))).save(out, format="JPEG", progressive=True, quality=90)
    return out.getvalue()


@pytest.mark.parametrize("kind", ["baseline JPEG", "progressive JPEG", "PNG"])
def test_the_cheap_check_is_never_laxer_than_pillows_full_decode(tmp_path: Path, kind: str) -> None:
    """Cut the file at many places: wherever Pillow's full decode (the reference) fails, the header-and-structure
    check refuses too; the whole file passes both."""
    data = {"baseline JPEG": lambda: jpeg(320, 240, seed=36), "progressive JPEG": _progressive_jpeg,
            "PNG": _png}[kind]()
    whole = tmp_path / "whole"
    whole.write_bytes(data)
    assert check_image(whole, name="the photo")[:2] in ((320, 240), (300, 200))
    cuts = sorted({len(data) * k // 40 for k in range(1, 40)} | {len(data) - 1, len(data) - 2})
    refused_by_pillow = 0
    for cut in cuts:
        part = tmp_path / f"cut-{cut}"
        part.write_bytes(data[:cut])
        try:
            with Image.open(part) as img:
                img.load()
        except (OSError, SyntaxError):  # Pillow: "image file is truncated" and the like
            refused_by_pillow += 1
            with pytest.raises(NotAnImage):
                check_image(part, name="the photo")
    assert refused_by_pillow >= len(cuts) - 2  # the cuts are real: Pillow refuses (nearly) every one


def test_a_whole_upload_whose_rename_was_lost_is_kept_without_sending_it_again(camp: Any) -> None:
    """A power cut after the last chunk but before the rename reached the disk: the partial file is whole; the
    tablet's next upload finds it begun at its full length and the camp keeps it, with no byte sent again."""
    server, demo, app, http, tablet, client = camp
    data = jpeg(seed=37)
    photo = _unit_photo(tablet, demo, data)
    client.sync()
    upload_photos(tablet, http, tablet.token())
    vault = app.state.photos
    partial = vault.root / "partial" / f"{photo.sha256}.{len(data)}"
    vault.path(photo.sha256).rename(partial)  # as if the rename had been lost
    assert http.get(f"/v1/photos/files/{photo.sha256}", headers=_tus(tablet.token())).status_code == 404
    again = upload_photos(tablet, http, tablet.token())
    assert again.sent == [photo.sha256] and again.bytes_sent == 0
    assert vault.path(photo.sha256).read_bytes() == data and not partial.exists()


def test_the_running_hash_survives_chunks_and_a_restart(tmp_path: Path) -> None:
    """The hash is taken while the chunks stream in; a server restarted mid-upload (a new vault on the same
    folder) hashes what reached the disk again, so a right file is kept and a changed one is still caught
    (hashlib's SHA-256 of the whole file is the yardstick)."""
    from schema.errors import UploadMismatch
    from sync_server.photos import PhotoVault

    data = jpeg(seed=38)
    sha = hashlib.sha256(data).hexdigest()
    first = PhotoVault(tmp_path / "camp-photos")
    first.begin(sha, len(data))
    third = len(data) // 3
    assert first.append(sha, 0, [data[:1000], data[1000:third]]).offset == third
    restarted = PhotoVault(tmp_path / "camp-photos")  # the server restarted: no running hash in memory
    assert restarted.state(sha).offset == third
    assert restarted.append(sha, third, [data[third:2 * third]]).offset == 2 * third
    assert restarted.append(sha, 2 * third, [data[2 * third:]]).complete
    assert restarted.path(sha).read_bytes() == data

    changed = bytearray(jpeg(seed=39))
    other = hashlib.sha256(changed).hexdigest()
    restarted.begin(other, len(changed))
    restarted.append(other, 0, [bytes(changed[:5000])])
    changed[6000] ^= 0xFF  # a byte changed in the part sent after the first chunk
    with pytest.raises(UploadMismatch, match="send the photo again from byte 0"):
        restarted.append(other, 5000, [bytes(changed[5000:])])
    assert not restarted.has(other) and restarted.begun([other]) == {}


def test_a_photo_of_another_format_is_decoded_whole_and_an_unrecorded_hash_stays_refused(camp: Any) -> None:
    """The quick finish (header and end marker, where the last chunk arrived) is for JPEG and PNG only: a GIF is
    decoded whole by Pillow (in a worker thread) before it is kept, and a cut one is refused. ``/missing``
    remembers which hashes have records, so that a creation needs no query; a hash no record names is still
    refused (404, tus: the upload does not exist) after ``/missing`` has listed it."""
    server, demo, app, http, tablet, client = camp
    first = _unit_photo(tablet, demo, jpeg(seed=40))
    client.sync()
    template = server.get(Photo, first.id)
    out = io.BytesIO()
    Image.frombytes("RGB", (120, 90), random.Random(9).randbytes(120 * 90 * 3)).save(out, format="GIF")
    gif = out.getvalue()
    sha = _record_for(server, template, gif)
    stranger = hashlib.sha256(b"bytes no record names").hexdigest()
    r = http.post("/v1/photos/missing", json={"hashes": [sha, stranger]}, headers=_tus(tablet.token()))
    assert r.status_code == 200 and r.json()["missing"] == sorted([sha, stranger])
    r = _create(http, tablet.token(), gif)
    assert r.status_code == 201 and r.headers["Upload-Offset"] == str(len(gif)), r.text
    with Image.open(app.state.photos.path(sha)) as img:  # Pillow decodes what the camp kept
        img.load()
        assert (img.format, img.size) == ("GIF", (120, 90))
    meta = f"sha256 {base64.b64encode(stranger.encode()).decode()}"
    r = http.post("/v1/photos/uploads", headers=_tus(tablet.token(), **{"Upload-Length": "100",
                                                                          "Upload-Metadata": meta}))
    assert r.status_code == 404 and "push the tablet's versions before its photos" in r.json()["message"]
    assert r.headers["Tus-Resumable"] == "1.0.0"
    assert app.state.photos.begun([stranger]) == {}  # nothing begun for it
