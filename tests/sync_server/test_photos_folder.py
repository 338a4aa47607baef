"""The camp's photo folder as a setting (``--photos-dir`` on ``baulk serve``, ``baulk export`` and ``baulk bundle``,
else ``BAULK_SERVER_PHOTOS_DIR``, else beside the store), and the return bundle's thumbnail pack: thumbnails only,
of the photos another tablet took, kept by the USB-only tablet where its photo lists look for them. Pillow reads
each thumbnail (the reference reader); pandas reads the export's register."""

from __future__ import annotations

import io
import zipfile
from pathlib import Path
from typing import Any

import httpx
import pandas as pd
from click.testing import CliRunner
from PIL import Image

from mobile.bundles import read_return_bundle
from mobile.photos import photo_folder, photo_path, thumbnail_if_kept, upload_photos
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.loopback import serve_in_thread
from sync_server.settings import ServerSettings
from tests.helpers import enrolled_tablet, seeded_server, synced_tablet
from tests.sync_server.test_photos import _unit_photo, jpeg


def _camp_with_a_photo(tmp_path: Path, photos: Path) -> tuple[Any, Any, Any, bytes]:
    """A camp whose photo folder is ``photos``; TAB-1 has sent it one photo of unit 101 (record and file)."""
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    app = create_app(ServerSettings(database_url=url, photos_dir=photos), store=server)
    data = jpeg(800, 600, seed=41)
    with serve_in_thread(app) as base, httpx.Client(base_url=base, timeout=30) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        photo = _unit_photo(tablet, demo, data, caption="101 in plan")
        client.sync()
        upload_photos(tablet, http, tablet.token())
        tablet.close()
    return server, demo, photo, data


def test_the_return_bundle_carries_thumbnails_only_and_the_tablet_keeps_them(tmp_path: Path) -> None:
    photos = tmp_path / "photo-disk"
    server, _demo, photo, data = _camp_with_a_photo(tmp_path, photos)
    assert (photos / photo.sha256[:2] / photo.sha256).read_bytes() == data  # the setting decided the folder
    usb_tablet, _device, _token = enrolled_tablet(server, tmp_path / "TAB-2.sqlite", "TAB-2")
    stick = tmp_path / "stick"
    stick.mkdir()
    run = CliRunner().invoke(cli, ["bundle", "for-tablet", "TAB-2", "--out", str(stick / "r.baulkreturn"),
                                   "--db", server.url, "--photos-dir", str(photos)])
    assert run.exit_code == 0, run.output
    assert f"and {stick / 'r.baulkreturn'}.thumbs.zip: 1 photo thumbnail (keep" in run.output
    with zipfile.ZipFile(stick / "r.baulkreturn.thumbs.zip") as z:
        assert z.namelist() == [f"{photo.sha256}.png"]
        thumb = z.read(f"{photo.sha256}.png")
    assert data not in thumb and len(thumb) < len(data)  # a thumbnail, never the photo
    with Image.open(io.BytesIO(thumb)) as img:  # Pillow reads it: a PNG of at most 256 pixels a side
        assert img.format == "PNG" and img.size == (256, 192)

    read = read_return_bundle(usb_tablet, stick / "r.baulkreturn")
    assert read.thumbnails == 1 and "1 photo thumbnail from camp." in read.sentence()
    folder = photo_folder(usb_tablet)
    assert not photo_path(folder, photo.sha256).exists()  # the photo's file stays at camp
    shown = thumbnail_if_kept(folder, photo.sha256)  # what the tablet's photo lists ask for
    assert shown is not None and shown.read_bytes() == thumb
    usb_tablet.close()

    # TAB-1 took the photo: its return bundle carries no thumbnail of it
    run = CliRunner().invoke(cli, ["bundle", "for-tablet", "TAB-1", "--out", str(stick / "t1.baulkreturn"),
                                   "--db", server.url, "--photos-dir", str(photos)])
    assert run.exit_code == 0, run.output
    assert "thumbs.zip" not in run.output and not (stick / "t1.baulkreturn.thumbs.zip").exists()
    server.close()


def test_export_finds_the_photos_in_the_folder_given(tmp_path: Path, monkeypatch: Any) -> None:
    photos = tmp_path / "photo-disk"
    server, _demo, photo, data = _camp_with_a_photo(tmp_path, photos)
    server.close()
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    run = CliRunner().invoke(cli, ["export", "--out", str(tmp_path / "out"), "--db", url, "--photos-dir",
                                   str(photos)])
    assert run.exit_code == 0, run.output
    register = pd.read_csv(tmp_path / "out" / "photo_register.csv", dtype=str, keep_default_na=False)
    assert list(register["file"]) == ["photos/unit-101_TAB-1-P1.jpg"]
    assert (tmp_path / "out" / "photos" / "unit-101_TAB-1-P1.jpg").read_bytes() == data
    # without the option (and no setting) the default folder beside the store is read: it holds no photo
    monkeypatch.delenv("BAULK_SERVER_PHOTOS_DIR", raising=False)
    run = CliRunner().invoke(cli, ["export", "--out", str(tmp_path / "plain"), "--db", url])
    assert run.exit_code == 0, run.output
    assert list(pd.read_csv(tmp_path / "plain" / "photo_register.csv", dtype=str, keep_default_na=False)["file"]) == [""]
    # the setting (environment) is the same folder as the option
    monkeypatch.setenv("BAULK_SERVER_PHOTOS_DIR", str(photos))
    run = CliRunner().invoke(cli, ["export", "--out", str(tmp_path / "env"), "--db", url])
    assert run.exit_code == 0, run.output
    assert (tmp_path / "env" / "photos" / "unit-101_TAB-1-P1.jpg").read_bytes() == data
