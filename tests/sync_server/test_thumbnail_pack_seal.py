"""The thumbnail pack beside a return bundle is under the bundle's seal (issue 19): ``baulk bundle for-tablet``
names the pack's SHA-256 and size in the sealed manifest, and the tablet's ``read_return_bundle`` refuses a pack
that differs (naming the file and the fix, nothing read) while a missing pack stays allowed. The reference for
the hash is Python's hashlib over the file's bytes."""

from __future__ import annotations

import hashlib
import io
import json
import shutil
import zipfile
from pathlib import Path

import pytest
from click.testing import CliRunner
from PIL import Image

from mobile.bundles import read_return_bundle
from mobile.photos import photo_folder, thumbnail_if_kept
from mobile.store import TabletStore
from schema.errors import BundleInvalid
from sync_server.cli import cli
from tests.helpers import enrolled_tablet
from tests.sync_server.test_photos_folder import _camp_with_a_photo


def _for_tablet(server, photos: Path, out: Path) -> str:  # type: ignore[no-untyped-def]
    run = CliRunner().invoke(cli, ["bundle", "for-tablet", "TAB-2", "--out", str(out), "--db", server.url,
                                   "--photos-dir", str(photos)])
    assert run.exit_code == 0, run.output
    return run.output


def _camp_and_return_bundle(tmp_path: Path):  # type: ignore[no-untyped-def]
    """A camp with one photo, TAB-2 enrolled, and `baulk bundle for-tablet TAB-2` written to a stick."""
    photos = tmp_path / "photo-disk"
    server, _demo, photo, _data = _camp_with_a_photo(tmp_path, photos)
    tablet, _device, _token = enrolled_tablet(server, tmp_path / "TAB-2.sqlite", "TAB-2")
    stick = tmp_path / "stick"
    stick.mkdir()
    bundle = stick / "r.baulkreturn"
    return server, photo, tablet, bundle, _for_tablet(server, photos, bundle)


def test_the_seal_names_the_pack_and_a_changed_pack_is_refused(tmp_path: Path) -> None:
    server, photo, tablet, bundle, _output = _camp_and_return_bundle(tmp_path)
    stick = bundle.parent
    pack = stick / "r.baulkreturn.thumbs.zip"
    with zipfile.ZipFile(bundle) as z:
        named = json.loads(z.read("manifest.json"))["thumbnails"]
    assert named == {"file": pack.name, "sha256": hashlib.sha256(pack.read_bytes()).hexdigest(),
                     "bytes": pack.stat().st_size, "count": 1}

    # a pack with one byte changed (the same size): refused, naming the pack and the fix; nothing read
    good = pack.read_bytes()
    bad = bytearray(good)
    bad[len(bad) // 2] ^= 0xFF
    pack.write_bytes(bytes(bad))
    with pytest.raises(BundleInvalid) as refused:
        read_return_bundle(tablet, bundle)
    message = str(refused.value)
    assert message.startswith("r.baulkreturn.thumbs.zip is not the thumbnail pack the camp server sealed with "
                              "r.baulkreturn (its SHA-256 is not the one the seal names)")
    assert "delete r.baulkreturn.thumbs.zip to read the bundle without its photo thumbnails" in message
    assert "baulk bundle for-tablet TAB-2" in message
    assert tablet.list(type(photo)) == []  # nothing was applied: the photo record did not come in
    assert thumbnail_if_kept(photo_folder(tablet), photo.sha256) is None

    pack.write_bytes(good[:-10])  # cut short
    with pytest.raises(BundleInvalid, match=rf"\(it has {len(good) - 10} bytes; the seal names {len(good)}\)"):
        read_return_bundle(tablet, bundle)
    pack.write_bytes(good)

    # a whole, well-formed pack with another picture under the photo's name: refused all the same
    other = io.BytesIO()
    Image.new("RGB", (256, 192), (255, 0, 0)).save(other, format="PNG")
    with zipfile.ZipFile(pack, "w") as z:
        z.writestr(f"{photo.sha256}.png", other.getvalue())
    with pytest.raises(BundleInvalid, match=r"^r\.baulkreturn\.thumbs\.zip is not the thumbnail pack"):
        read_return_bundle(tablet, bundle)
    assert thumbnail_if_kept(photo_folder(tablet), photo.sha256) is None

    # the pack taken away: the bundle reads, with no thumbnails (they are optional)
    pack.unlink()
    read = read_return_bundle(tablet, bundle)
    assert read.applied > 0 and read.thumbnails == 0 and tablet.list(type(photo))
    tablet.close()
    server.close()


def test_the_sealed_pack_is_kept_and_a_stray_pack_is_refused(tmp_path: Path) -> None:
    server, photo, tablet, bundle, output = _camp_and_return_bundle(tmp_path)
    stick, photos = bundle.parent, tmp_path / "photo-disk"
    assert f"and {bundle}.thumbs.zip: 1 photo thumbnail (keep" in output
    read = read_return_bundle(tablet, bundle)
    assert read.thumbnails == 1
    assert thumbnail_if_kept(photo_folder(tablet), photo.sha256) is not None

    # TAB-1 took the photo: its return bundle has no pack and its seal names none; a pack copied beside it is refused
    run = CliRunner().invoke(cli, ["bundle", "for-tablet", "TAB-1", "--out", str(stick / "t1.baulkreturn"),
                                   "--db", server.url, "--photos-dir", str(photos)])
    assert run.exit_code == 0 and "thumbs.zip" not in run.output, run.output
    with zipfile.ZipFile(stick / "t1.baulkreturn") as z:
        assert json.loads(z.read("manifest.json"))["thumbnails"] is None
    shutil.copyfile(stick / "r.baulkreturn.thumbs.zip", stick / "t1.baulkreturn.thumbs.zip")
    taker = TabletStore.open(tmp_path / "TAB-1.sqlite")
    with pytest.raises(BundleInvalid, match=r"^t1\.baulkreturn\.thumbs\.zip lies beside t1\.baulkreturn, but the "
                                            r"bundle's seal names no thumbnail pack"):
        read_return_bundle(taker, stick / "t1.baulkreturn")
    taker.close()
    tablet.close()
    server.close()
