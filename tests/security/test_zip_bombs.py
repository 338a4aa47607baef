"""Zip bombs: a bundle or season archive whose entries inflate far beyond their size on disk is refused before
it is read whole, naming the entry and the cap, and nothing of it is applied.

Unchecked, a 1 MB bundle whose ``manifest.json`` inflated to 1 GiB grew ``baulk bundle import`` to 2 GB of memory
before anything was checked; the same with a season archive's ``versions.jsonl``. The files here stay small: a
declared size that lies, a real 65 MiB run of one byte (about 65 kB deflated), another compression method.
"""

from __future__ import annotations

import struct
import zipfile
from pathlib import Path
from typing import Any, Callable

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from mobile.bundles import export_bundle
from schema.records import Find
from schema.sync.bundle import BATCH_CAP, MANIFEST_CAP
from schema.sync.tables import field_version
from sync_server.cli import cli
from sync_server.seasons import write_archive
from sync_server.store import ServerStore
from tests.helpers import find_data, seeded_server, synced_tablet

BUNDLE_AGAIN = "copy it from the tablet again"
ARCHIVE_AGAIN = "write it again from the old store"


def _declare(path: Path, entry: str, size: int) -> None:
    """Make the zip claim ``size`` inflated bytes for ``entry`` (local header and central directory alike)."""
    data = bytearray(path.read_bytes())
    name = entry.encode()
    for signature, size_at, name_len_at, name_at in ((b"PK\x03\x04", 22, 26, 30), (b"PK\x01\x02", 24, 28, 46)):
        at = data.find(signature)
        while at != -1:
            (length,) = struct.unpack_from("<H", data, at + name_len_at)
            if bytes(data[at + name_at:at + name_at + length]) == name:
                struct.pack_into("<I", data, at + size_at, size)
            at = data.find(signature, at + 4)
    path.write_bytes(bytes(data))


def _rewrite(src: Path, dst: Path, change: Callable[[str, bytes], bytes],
             method: Callable[[str], int] = lambda _name: zipfile.ZIP_DEFLATED) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item.filename, change(item.filename, zin.read(item.filename)),
                          compress_type=method(item.filename))
    return dst


def _refusal(file: str, text: str, what: str, again: str) -> str:
    return f"Error: {file}: {text}; it is not a {what} Baulk wrote, or it was altered. Nothing was imported: {again}\n"


@pytest.fixture
def bundle(tmp_path: Path):  # type: ignore[no-untyped-def]
    """A camp server (SQLite) and a real bundle of two finds from its enrolled tablet TAB-1."""
    from fastapi.testclient import TestClient

    from sync_server.app import create_app

    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    with TestClient(create_app(store=server)) as http:
        tablet, _client = synced_tablet(server, http, tmp_path, "TAB-1")
    for _ in range(2):
        tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    export_bundle(tablet, tmp_path / "day.baulkbundle", batch_size=20)
    tablet.close()
    before = _versions(server)
    server.close()
    yield url, tmp_path / "day.baulkbundle", before


def _versions(store: ServerStore) -> int:
    with store.read() as conn:
        return int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())


def _import(kind: str, path: Path, url: str) -> Any:
    return CliRunner().invoke(cli, [kind, "import", str(path), "--db", url])


def _after(url: str) -> tuple[int, int]:
    with ServerStore.open(url, create=False) as store:
        return _versions(store), store.count(Find)


def test_a_manifest_declaring_a_gibibyte_is_refused_before_it_is_inflated(bundle) -> None:  # type: ignore[no-untyped-def]
    url, good, before = bundle
    bomb = good.with_name("bomb.baulkbundle")
    bomb.write_bytes(good.read_bytes())
    _declare(bomb, "manifest.json", 1 << 30)
    r = _import("bundle", bomb, url)
    assert (r.exit_code, r.output) == (1, _refusal(
        "bomb.baulkbundle", "entry manifest.json declares 1073741824 bytes, more than the 1 MiB such an entry may hold",
        "bundle", BUNDLE_AGAIN))
    assert _after(url) == (before, 0)


def test_a_batch_inflating_past_its_cap_is_refused_and_nothing_is_applied(bundle) -> None:  # type: ignore[no-untyped-def]
    url, good, before = bundle
    # 65 MiB of one byte after the versions: still the same JSON (the manifest's hashes and seal still hold), and
    # about 65 kB deflated
    padding = b" " * (BATCH_CAP + (1 << 20))
    bomb = _rewrite(good, good.with_name("bomb.baulkbundle"),
                    lambda name, data: data + padding if name == "batches/000002.json" else data)
    assert bomb.stat().st_size < 200_000
    r = _import("bundle", bomb, url)
    assert (r.exit_code, r.output) == (1, _refusal(
        "bomb.baulkbundle", f"entry batches/000002.json declares {len(padding) + _size(good, 'batches/000002.json')} "
        "bytes, more than the 64 MiB such an entry may hold", "bundle", BUNDLE_AGAIN))
    assert _after(url) == (before, 0)  # batch 1 was sound, and it was not applied either


def _size(path: Path, entry: str) -> int:
    with zipfile.ZipFile(path) as z:
        return z.getinfo(entry).file_size


def test_a_manifest_smaller_on_paper_than_inflated_is_refused(bundle) -> None:  # type: ignore[no-untyped-def]
    url, good, before = bundle
    bomb = _rewrite(good, good.with_name("bomb.baulkbundle"),
                    lambda name, data: data + b" " * (2 * MANIFEST_CAP) if name == "manifest.json" else data)
    _declare(bomb, "manifest.json", 1000)  # says 1000 bytes; inflates to 2 MiB and more
    r = _import("bundle", bomb, url)
    assert r.exit_code == 1
    assert r.output.startswith("Error: bomb.baulkbundle is damaged (entry manifest.json fails its checksum or cannot "
                               "be inflated: ")
    assert r.output.endswith(f"); {BUNDLE_AGAIN}\n")
    assert _after(url) == (before, 0)


def test_an_entry_compressed_another_way_is_refused(bundle) -> None:  # type: ignore[no-untyped-def]
    url, good, before = bundle  # bzip2 and lzma inflate without a bound per read
    odd = _rewrite(good, good.with_name("odd.baulkbundle"), lambda _name, data: data,
                   method=lambda name: zipfile.ZIP_BZIP2 if name == "manifest.json" else zipfile.ZIP_DEFLATED)
    r = _import("bundle", odd, url)
    assert (r.exit_code, r.output) == (1, _refusal(
        "odd.baulkbundle", "entry manifest.json is compressed with method 12; Baulk writes only stored and deflated "
        "entries", "bundle", BUNDLE_AGAIN))
    assert _after(url) == (before, 0)


@pytest.fixture
def archive(tmp_path: Path):  # type: ignore[no-untyped-def]
    """A season archive of a store with the site and one find, and an empty store to import it into."""
    old, demo = seeded_server(f"sqlite:///{tmp_path / 'old.sqlite'}")
    old.add(Find(**find_data(demo, number=1)))
    write_archive(old, tmp_path / "season.zip")
    old.close()
    url = f"sqlite:///{tmp_path / 'new.sqlite'}"
    with ServerStore.open(url) as new:
        before = _versions(new)
    return url, tmp_path / "season.zip", before


def test_an_archive_log_declaring_two_gibibytes_is_refused_before_it_is_inflated(archive) -> None:  # type: ignore[no-untyped-def]
    url, good, before = archive
    bomb = good.with_name("bomb.zip")
    bomb.write_bytes(good.read_bytes())
    _declare(bomb, "versions.jsonl", 1 << 31)
    r = _import("season", bomb, url)
    assert (r.exit_code, r.output) == (1, _refusal(
        "bomb.zip", "entry versions.jsonl declares 2147483648 bytes, more than the 1 GiB such an entry may hold",
        "season archive", ARCHIVE_AGAIN))
    assert _after(url) == (before, 0)


def test_an_archive_line_past_its_cap_is_refused_while_streaming(archive) -> None:  # type: ignore[no-untyped-def]
    url, good, before = archive
    long_line = b" " * (17 << 20)  # one 17 MiB line, about 17 kB deflated; a version is a few hundred bytes
    bomb = _rewrite(good, good.with_name("bomb.zip"),
                    lambda name, data: long_line + data if name == "versions.jsonl" else data)
    assert bomb.stat().st_size < 100_000
    r = _import("season", bomb, url)
    assert (r.exit_code, r.output) == (1, _refusal(
        "bomb.zip", "a line of entry versions.jsonl runs past 16 MiB", "season archive", ARCHIVE_AGAIN))
    assert _after(url) == (before, 0)
