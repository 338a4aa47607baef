"""Bundles: exported by a tablet, checked whole and applied through the push path; bad ones change nothing."""

from __future__ import annotations

import json
import shutil
import zipfile
from pathlib import Path

import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient

from mobile.bundles import export_bundle
from mobile.sync import SyncClient
from schema.errors import BundleInvalid
from schema.records import Find
from sync_server.app import create_app
from sync_server.bundles import import_bundle
from sync_server.cli import cli
from tests.helpers import enrolled_tablet, find_data, seeded_server


@pytest.fixture
def field(tmp_path: Path):  # type: ignore[no-untyped-def]
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    tablet, _device, token = enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1")
    with TestClient(create_app(store=server)) as http:
        SyncClient(tablet, http, token).sync()  # enrolled at camp, then off to the trench
        for _ in range(4):
            tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        yield server, tablet, http, token, url, tmp_path
    tablet.close()
    server.close()


def test_bundle_carries_the_day_and_a_later_push_is_answered_from_the_stored_ack(field) -> None:  # type: ignore[no-untyped-def]
    server, tablet, http, token, _url, tmp = field
    manifest = export_bundle(tablet, tmp / "day.baulkbundle", batch_size=40)
    assert len(manifest["batches"]) >= 2
    result = import_bundle(server, tmp / "day.baulkbundle")
    assert result["replayed"] == 0 and server.count(Find) == 4
    again = import_bundle(server, tmp / "day.baulkbundle")
    assert again["applied"] == 0 and again["replayed"] == len(manifest["batches"])
    report = SyncClient(tablet, http, token, batch_size=40).sync()  # back on the Wi-Fi: nothing is applied twice
    assert report.replayed_batches == report.pushed_batches == len(manifest["batches"])
    assert server.count(Find) == 4


def _rewrite(src: Path, dst: Path, change) -> None:  # type: ignore[no-untyped-def]
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            zout.writestr(item, change(item.filename, data))


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        ("truncate", "is not a readable bundle"),
        ("tamper_value", "does not match its hash"),
        ("tamper_manifest", "fails its seal"),
        ("format", "has bundle format 99"),
    ],
)
def test_bad_bundles_are_refused_whole(field, damage: str, message: str) -> None:  # type: ignore[no-untyped-def]
    server, tablet, _http, _token, _url, tmp = field
    good = tmp / "day.baulkbundle"
    export_bundle(tablet, good, batch_size=40)
    bad = tmp / "bad.baulkbundle"
    if damage == "truncate":
        bad.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    elif damage == "tamper_value":
        def change(name: str, data: bytes) -> bytes:
            if name.endswith("000002.json"):
                return data.replace(b'"basalt"', b'"chert"').replace(b'"obsidian"', b'"chert"')
            return data
        _rewrite(good, bad, change)
    else:
        def change(name: str, data: bytes) -> bytes:
            if name == "manifest.json":
                m = json.loads(data)
                if damage == "format":
                    m["format_version"] = 99
                else:
                    m["batches"] = m["batches"][1:]
                return json.dumps(m).encode()
            return data
        _rewrite(good, bad, change)
    before = server.count(Find)
    with pytest.raises(BundleInvalid, match=message):
        import_bundle(server, bad)
    assert server.count(Find) == before == 0


def test_bundle_commands(field) -> None:  # type: ignore[no-untyped-def]
    server, tablet, _http, _token, url, tmp = field
    store_path = tablet.path
    tablet.close()
    out = tmp / "usb"
    out.mkdir()
    r = CliRunner().invoke(cli, ["bundle", "export", "--store", str(store_path), "--out", str(out)])
    assert r.exit_code == 0, r.output
    (file,) = out.glob("TAB-1-*.baulkbundle")
    assert r.output.startswith(f"wrote {file}: ")
    server.close()
    r = CliRunner().invoke(cli, ["bundle", "import", str(file), "--db", url])
    assert r.exit_code == 0, r.output
    assert r.output.startswith(f"imported {file.name} from TAB-1: ")
    junk = tmp / "junk.baulkbundle"
    shutil.copy(file, junk)
    junk.write_bytes(b"not a zip")
    r = CliRunner().invoke(cli, ["bundle", "import", str(junk), "--db", url])
    assert r.exit_code == 1 and r.output.startswith("Error: junk.baulkbundle is not a readable bundle")
