"""Return bundles (issue 16): a tablet that only ever travels by USB gets what a pull would give it (new number
blocks, a manager's resolution, camp corrections, other tablets' work) in a bundle the camp server writes and
seals for it. The tablet reads it through the Camp screen's controller or ``baulk bundle read``, once; a damaged
or misdirected one changes nothing and says why."""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
import struct
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient

from mobile.bundles import export_bundle, read_return_bundle
from mobile.controllers import CampLink
from mobile.store import TabletStore
from mobile.sync import pending_count
from schema.errors import BundleForAnotherDevice, BundleInvalid, BundleLeavesGap, NoNumbersLeft
from schema.records import Correction, Find, NumberBlock
from schema.sync.bundle import _seal
from schema.sync.replica import state_get
from schema.sync.tables import open_conflict
from sync_server.app import create_app
from sync_server.bundles import device_cursor, import_bundle, write_for_tablet
from sync_server.cli import cli
from sync_server.curation import correct_record
from sync_server.sync import list_conflicts, resolve_conflict
from tests.helpers import enrolled_tablet, find_data, seeded_server, synced_tablet

RESOLVED = "rolled edge; retouch checked at camp"


@dataclass
class Camp:
    server: Any
    demo: Any
    tablet: Any  # TAB-1: enrolled at camp, then USB only
    device: Any
    url: str
    usb: Path
    tmp: Path
    finds: list[Any]
    other: Any  # TAB-2, on the camp Wi-Fi


def _record(tablet: Any, demo: Any, count: int) -> list[Any]:
    return [tablet.save_find(find=find_data(demo, number=tablet.next_find_number())) for _ in range(count)]


def _cursor(tablet: Any) -> int:
    with tablet.read() as conn:
        return int(state_get(conn, "cursor", "0") or 0)


def _dump(path: Path) -> str:
    """Every row of the tablet file, as SQL text (read beside the open store)."""
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as conn:
        return "\n".join(conn.iterdump())


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    """TAB-1 is enrolled at camp (numbers 1-100) and never syncs over Wi-Fi: its first return bundle brings it the
    site; it records 60 finds (past half its block), its bundle is imported (the camp issues its next block), the
    data manager corrects find 4's unit and find 3's notes, TAB-1 meanwhile edits find 3's notes too; its second
    bundle makes a conflict on them, which the manager resolves. TAB-2 works over Wi-Fi all along."""
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    tablet, device, _token = enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1")
    usb = tmp_path / "usb"
    usb.mkdir()
    with TestClient(create_app(store=server)) as http:
        other, client = synced_tablet(server, http, tmp_path, "TAB-2")
        first = write_for_tablet(server, label="TAB-1", out=usb)
        assert first["after"] == 0  # it never sent a bundle: everything from the start
        read_return_bundle(tablet, usb)
        assert [(b.first, b.last) for b in tablet.number_blocks()] == [(1, 100)]
        finds = _record(tablet, demo, 60)
        day1 = export_bundle(tablet, usb)
        import_bundle(server, Path(day1["path"]))
        assert device_cursor(server, device.id) == _cursor(tablet) == day1["cursor"] > 0
        correct_record(server, record="find", key="4", changes={"unit": "102"}, reason="section shows it in 102",
                       by="RM")
        correct_record(server, record="find", key="3", changes={"notes": "rolled edge"}, reason="seen at washing",
                       by="RM")
        tablet.put(tablet.get(Find, finds[2].id).model_copy(update={"notes": "edge damage"}))  # not seen the camp's
        import_bundle(server, Path(export_bundle(tablet, usb)["path"]))
        (clash,) = [c for c in list_conflicts(server) if c["field"] == "notes"]
        resolve_conflict(server, record="find", record_id=finds[2].id, field="notes", value=RESOLVED)
        other.save_find(find=find_data(demo, number=other.next_find_number(), material="basalt"))
        client.sync()
        yield Camp(server, demo, tablet, device, url, usb, tmp_path, finds, other)
    tablet.close()
    other.close()
    server.close()


def _for_tablet(camp: Camp, label: str = "TAB-1") -> Path:
    r = CliRunner().invoke(cli, ["bundle", "for-tablet", label, "--out", str(camp.usb), "--db", camp.url])
    assert r.exit_code == 0, r.output
    return Path(r.output.split(" ", 2)[1])


def _assert_received(camp: Camp) -> None:
    tablet, finds = camp.tablet, camp.finds
    assert [(b.first, b.last) for b in tablet.number_blocks()] == [(1, 100), (201, 700)]
    assert tablet.get(Find, finds[3].id).unit_id == camp.demo.units["102"].id  # the camp's correction
    assert tablet.get(Find, finds[2].id).notes == RESOLVED  # the manager's resolution
    with tablet.read() as conn:
        assert conn.execute(open_conflict.select()).all() == []
    assert sorted(c.reason for c in tablet.list(Correction)) == ["section shows it in 102", "seen at washing"]
    assert {f.number for f in tablet.list(Find) if f.device_id != camp.device.id} == {101}  # TAB-2's find


def test_for_tablet_writes_the_blocks_the_resolution_and_the_corrections(camp: Camp) -> None:
    cursor = device_cursor(camp.server, camp.device.id)
    r = CliRunner().invoke(cli, ["bundle", "for-tablet", "TAB-1", "--out", str(camp.usb), "--db", camp.url])
    assert r.exit_code == 0, r.output
    (path,) = [p for p in camp.usb.glob("TAB-1-from-camp-*.baulkreturn") if str(p) in r.output]
    with zipfile.ZipFile(path) as z:
        manifest = json.loads(z.read("manifest.json"))
        versions = [v for page in manifest["pages"] for v in json.loads(z.read(page["file"]))]
    assert manifest["after"] == cursor  # from where TAB-1's last bundle said it stood
    lines = r.output.splitlines()
    assert not [v for v in versions if v["device"] == str(camp.device.id)]  # the tablet holds its own changes
    camp_made = sum(1 for v in versions if v["device"] != str(camp.other.device_id()))
    assert lines == [
        f"wrote {path} for TAB-1: {len(versions)} changes after camp change {cursor} (up to {manifest['next']}), "
        f"{camp_made} of them made at camp",
        "number blocks: 1-100, 201-700",  # 201-700 was issued when the first bundle was imported
    ]
    assert {(v["record"], v["field"]) for v in versions if v["value"] == RESOLVED} == {("find", "notes")}
    blocks = {v["record_id"] for v in versions if v["record"] == "number_block"}
    held = {str(b.id): b for b in camp.server.list(NumberBlock)}
    assert {(held[b].first, held[b].device_id) for b in blocks} == {(201, camp.device.id)}  # only its own


def test_the_tablet_reads_it_on_the_camp_screen_once(camp: Camp) -> None:
    path = _for_tablet(camp)
    link = CampLink(camp.tablet)
    sent = pending_count(camp.tablet)  # the camp holds them, but the tablet had no answer yet
    assert sent > 0
    read = link.read_bundle(camp.usb)  # the stick's folder: the newest for this tablet
    assert read.path == path and not read.already
    assert read.applied == read.changes  # the bundle carries none of the tablet's own changes back
    assert read.sentence() == (
        f"Read {path.name}: {read.applied} new changes on this tablet. New find numbers: 201-700. The camp "
        f"confirmed {sent} changes this tablet sent. Checks run again on 61 finds of this tablet: CHECK: 1 find now "
        "fails a check (4; see Finds, Open checks). Find numbers left: 540.")  # find 4, moved to 102 at camp
    _assert_received(camp)
    status = "\n".join(link.status().lines())
    assert "Waiting to be sent: 0 changes" in status and "Last bundle from camp: " in status
    assert export_bundle(camp.tablet, camp.tmp / "nothing-new.baulkbundle")["batches"] == []  # none carried again
    before = _dump(camp.tablet.path)
    again = link.read_bundle(path)
    assert again.sentence() == (f"{path.name} was read before: this tablet already holds every change in it (camp "
                                f"changes up to {read.reached}), so nothing changed.")
    assert _dump(camp.tablet.path) == before
    # more finds than the first block held, with no Wi-Fi ever
    more = _record(camp.tablet, camp.demo, 50)
    assert [f.number for f in more][39:42] == [100, 201, 202]
    assert camp.tablet.count(Find, device_id=camp.device.id) == 110


def test_baulk_bundle_read_applies_it_once(camp: Camp) -> None:
    path = _for_tablet(camp)
    store_path, sent = camp.tablet.path, pending_count(camp.tablet)
    camp.tablet.close()
    r = CliRunner().invoke(cli, ["bundle", "read", str(path), "--store", str(store_path)])
    assert r.exit_code == 0, r.output
    assert r.output.startswith(f"Read {path.name}: ") and r.output.endswith(
        f"New find numbers: 201-700. The camp confirmed {sent} changes this tablet sent. Checks run again on 61 "
        "finds of this tablet: CHECK: 1 find now fails a check (4; see Finds, Open checks). Find numbers left: 540.\n")
    before = _dump(store_path)
    r = CliRunner().invoke(cli, ["bundle", "read", str(path), "--store", str(store_path)])
    assert r.exit_code == 0 and r.output.startswith(f"{path.name} was read before: ")
    assert _dump(store_path) == before
    camp.tablet = TabletStore.open(store_path)
    _assert_received(camp)


def _flip_a_byte_of(path: Path, entry: str, out: Path) -> None:
    """One byte of ``entry``'s compressed data changed, nothing else (the zip's own checksum then fails)."""
    data = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as z:
        info = z.getinfo(entry)
    name_len, extra_len = struct.unpack("<HH", data[info.header_offset + 26: info.header_offset + 30])
    start = info.header_offset + 30 + name_len + extra_len
    data[start + info.compress_size // 2] ^= 0x01
    out.write_bytes(bytes(data))


def _rewrite(src: Path, dst: Path, change) -> None:  # type: ignore[no-untyped-def]
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item, change(item.filename, zin.read(item.filename)))


def _page_value(name: str, data: bytes) -> bytes:
    return data.replace(RESOLVED.encode(), b"a value the manager never chose") if name.startswith("pages/") else data


def _manifest(edit):  # type: ignore[no-untyped-def]
    def change(name: str, data: bytes) -> bytes:
        if name != "manifest.json":
            return data
        m = json.loads(data)
        edit(m)
        return json.dumps(m).encode()
    return change


@pytest.mark.parametrize("damage", ["one byte", "a value in a page", "the manifest", "another device's",
                                    "another device's, relabelled"])
def test_a_damaged_or_misdirected_return_bundle_changes_nothing(camp: Camp, damage: str) -> None:
    good = _for_tablet(camp)
    bad = camp.tmp / f"TAB-1-from-camp-bad{''.join(c for c in damage if c.isalnum())}.baulkreturn"
    again = "ask the data manager to write it again (baulk bundle for-tablet TAB-1) and copy it onto the stick"
    if damage == "one byte":
        _flip_a_byte_of(good, "pages/000001.json", bad)
        error, message = BundleInvalid, (f"{bad.name} is damaged (entry pages/000001.json fails its checksum or cannot "
                                         "be inflated: ")
    elif damage == "a value in a page":
        _rewrite(good, bad, _page_value)
        error, message = BundleInvalid, (f"{bad.name}: page 1 does not match its hash; it was changed after the camp "
                                         f"server wrote it. Nothing was read: {again}")
    elif damage == "the manifest":
        _rewrite(good, bad, _manifest(lambda m: m.update(after=0)))  # "read it all again from the start"
        error, message = BundleInvalid, (f"{bad.name} fails its seal: it was changed after the camp server wrote it, "
                                         f"or sealed with another device's key. Nothing was read: {again}")
    else:
        theirs = _for_tablet(camp, "TAB-2")
        if damage == "another device's":
            shutil.copy(theirs, bad)
            error, message = BundleForAnotherDevice, (
                f"{bad.name} was written for TAB-2, not for this tablet (TAB-1); nothing was read. Ask the data "
                "manager for this tablet's own: baulk bundle for-tablet TAB-1 --out <the stick>")
        else:  # TAB-2's bundle, its manifest made to name TAB-1: TAB-2's key still seals it
            _rewrite(theirs, bad, _manifest(lambda m: m.update(device=str(camp.device.id), device_label="TAB-1")))
            error, message = BundleInvalid, f"{bad.name} fails its seal: "
    before = _dump(camp.tablet.path)
    with pytest.raises(error) as refused:
        read_return_bundle(camp.tablet, bad)
    assert str(refused.value).startswith(message), str(refused.value)
    assert _dump(camp.tablet.path) == before
    # the good one is still read whole afterwards
    assert not read_return_bundle(camp.tablet, good).already
    _assert_received(camp)


def test_the_camp_screen_says_why_a_bundle_was_refused_and_the_cli_says_it_in_one_line(camp: Camp) -> None:
    good = _for_tablet(camp)
    bad = camp.tmp / "tampered.baulkreturn"
    _rewrite(good, bad, _page_value)
    with pytest.raises(BundleInvalid, match="page 1 does not match its hash"):
        CampLink(camp.tablet).read_bundle(bad)
    store_path = camp.tablet.path
    camp.tablet.close()
    r = CliRunner().invoke(cli, ["bundle", "read", str(bad), "--store", str(store_path)])
    assert r.exit_code == 1
    assert r.output.count("\n") == 1
    assert r.output.startswith("Error: tampered.baulkreturn: page 1 does not match its hash")
    camp.tablet = TabletStore.open(store_path)


def test_a_tablet_file_restored_from_a_copy_is_told_it_misses_changes(camp: Camp) -> None:
    """The server writes from the position TAB-1's last bundle reported; TAB-1's file restored from a copy made at
    enrolment stands at 0 and must not skip what lies between."""
    from schema.records import Device

    restored = TabletStore.open(camp.tmp / "TAB-1-restored.sqlite")
    restored.set_identity(device=camp.server.get(Device, camp.device.id))
    restored.set_token(str(camp.tablet.token()))
    path = _for_tablet(camp)
    try:
        before = _dump(restored.path)
        with pytest.raises(BundleLeavesGap) as refused:
            read_return_bundle(restored, path)
        after = device_cursor(camp.server, camp.device.id)
        assert str(refused.value) == (
            f"{path.name} starts after camp change {after}, but this tablet holds the camp's changes only up to 0 (an "
            "older return bundle was not read, or this tablet file was restored from a copy); nothing was read. Read "
            "the older return bundle first, or write a bundle on this tablet (it tells the camp where this tablet "
            "stands), have it imported, and ask for a new return bundle for TAB-1")
        assert _dump(restored.path) == before
    finally:
        restored.close()


def test_for_tablet_issues_a_block_when_half_of_the_newest_is_used(tmp_path: Path) -> None:
    """A block issued at the return bundle itself, not only at an import: the camp renumbered a find of the tablet
    past half its block (a camp correction), so the next block goes out with the bundle."""
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    tablet, device, _token = enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1")
    usb = tmp_path / "usb"
    usb.mkdir()
    try:
        read_return_bundle(tablet, Path(write_for_tablet(server, label="TAB-1", out=usb)["path"]))
        _record(tablet, demo, 10)
        import_bundle(server, Path(export_bundle(tablet, usb)["path"]))
        assert [(b.first, b.last) for b in server.blocks_for(device.id)] == [(1, 100)]  # 10 of 100: none yet
        correct_record(server, record="find", key="10", changes={"number": "60"}, reason="label misread", by="RM")
        r = write_for_tablet(server, label="TAB-1", out=usb)
        assert (r["issued"], r["blocks"]) == ([(101, 600)], [(1, 100), (101, 600)])
        read = read_return_bundle(tablet, Path(r["path"]))
        assert read.new_blocks == [(101, 600)]
        assert tablet.next_find_number() == 61 and read.numbers_left == 40 + 500
    finally:
        tablet.close()
        server.close()


def test_the_bundle_a_tablet_sends_carries_its_cursor_and_a_bad_one_is_refused(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    tablet, device, token = enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1")
    try:
        read_return_bundle(tablet, Path(write_for_tablet(server, label="TAB-1", out=tmp_path)["path"]))
        _record(tablet, demo, 2)
        good = tmp_path / "day.baulkbundle"
        manifest = export_bundle(tablet, good)
        assert manifest["cursor"] == _cursor(tablet) > 0
        bad = tmp_path / "word.baulkbundle"
        token_hash = hashlib.sha256(token.encode()).hexdigest()

        def resealed(m: dict[str, Any]) -> None:
            m["cursor"] = "all"
            m["seal"] = _seal(m, token_hash)  # as the tablet itself would seal it
        _rewrite(good, bad, _manifest(resealed))
        with pytest.raises(BundleInvalid) as refused:
            import_bundle(server, bad)
        assert str(refused.value) == (
            'word.baulkbundle: the manifest\'s cursor "all" is not a change-log position (a whole number from 0 to '
            "9007199254740991); it is not a bundle Baulk wrote, or it was altered. Nothing was imported: copy it "
            "from the tablet again")
        assert server.count(Find) == 0 and device_cursor(server, device.id) == 0
        import_bundle(server, good)
        assert server.count(Find) == 2 and device_cursor(server, device.id) == manifest["cursor"]
    finally:
        tablet.close()
        server.close()


def test_a_usb_only_tablet_would_have_run_dry_without_a_return_bundle(tmp_path: Path) -> None:
    """The control: the same tablet with only its outgoing bundles stops at its first block's end."""
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    tablet, device, _token = enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1", block=20)
    try:
        read_return_bundle(tablet, Path(write_for_tablet(server, label="TAB-1", out=tmp_path)["path"]))
        _record(tablet, demo, 20)
        import_bundle(server, Path(export_bundle(tablet, tmp_path)["path"]))
        assert len(server.blocks_for(device.id)) == 2  # the camp issued the next block at the import ...
        with pytest.raises(NoNumbersLeft):  # ... which only a return bundle carries to the tablet
            tablet.next_find_number()
        read_return_bundle(tablet, Path(write_for_tablet(server, label="TAB-1", out=tmp_path)["path"]))
        assert tablet.next_find_number() == 21
    finally:
        tablet.close()
        server.close()


def test_for_tablet_says_what_to_give_when_it_cannot_write(tmp_path: Path) -> None:
    from sync_server.devices import revoke_device

    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, _demo = seeded_server(url)
    enrolled_tablet(server, tmp_path / "TAB-1.sqlite", "TAB-1")[0].close()
    enrolled_tablet(server, tmp_path / "TAB-2.sqlite", "TAB-2")[0].close()
    revoke_device(server, "TAB-2")
    server.close()

    def run(*args: str) -> Any:
        return CliRunner().invoke(cli, ["bundle", "for-tablet", *args, "--db", url])

    r = run("TAB-9", "--out", str(tmp_path))
    assert (r.exit_code, r.output) == (1, "Error: no device is labelled 'TAB-9' (enrolled devices: TAB-1); "
                                          "give the label baulk device list shows\n")
    r = run("TAB-1", "--out", str(tmp_path / "no-stick" / "b.baulkreturn"))
    assert (r.exit_code, r.output) == (1, f"Error: the folder {tmp_path / 'no-stick'} does not exist; plug the stick "
                                          "in and give its folder (or a file in it) as --out\n")
    r = run("TAB-2", "--out", str(tmp_path))
    assert r.exit_code == 1 and r.output.startswith("Error: device TAB-2 was revoked on ")
    assert r.output.endswith(", so no return bundle is written for it; enrol the tablet again as a new device\n")
    assert list(tmp_path.glob("*.baulkreturn")) == []
