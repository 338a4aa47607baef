"""``baulk inspect`` never writes (issue 15, item 9): not a byte of the file changes and no file appears beside it,
whatever it is given; anything but a tablet file is refused in one line."""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
from pathlib import Path

import pytest
from click.testing import CliRunner

from mobile.store import TabletStore
from schema.demo_site import build_site
from sync_server.cli import cli
from tests.helpers import demo_tablet, find_data, seeded_server

GIVE = "check the path and give the tablet's own .sqlite file"


def _folder(path: Path, *, shared_memory: bool = False) -> dict[str, str]:
    """Every file in ``path``'s folder with the SHA-256 of its bytes; with ``shared_memory``, the bytes of the
    ``-shm`` file are left out: it is SQLite's lock and log index, which every reader of a file in use marks."""
    return {p.name: "present" if shared_memory and p.name.endswith("-shm") else hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(path.parent.iterdir())}


def _inspect(path: Path, *, shared_memory: bool = False) -> tuple[int, str]:
    before = _folder(path, shared_memory=shared_memory)
    result = CliRunner().invoke(cli, ["inspect", str(path)], catch_exceptions=False)
    assert _folder(path, shared_memory=shared_memory) == before, "inspect changed a file or made one"
    return result.exit_code, result.output


def _empty(folder: Path) -> Path:
    path = folder / "tablet.sqlite"
    path.touch()
    return path


def _server_store(folder: Path) -> Path:
    server, _demo = seeded_server(f"sqlite:///{folder / 'camp.sqlite'}")
    server.close()
    return folder / "camp.sqlite"


def _other_database(folder: Path) -> Path:
    path = folder / "birds.sqlite"  # another program's file, in SQLite's default (rollback journal) mode
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE sighting (species TEXT, seen_at TEXT)")
        conn.execute("INSERT INTO sighting VALUES ('hamerkop', '2026-07-01')")
    conn.close()
    return path


def _text(folder: Path) -> Path:
    path = folder / "notes.sqlite"
    path.write_text("trench 2: three flakes by the baulk\n")
    return path


@pytest.mark.parametrize(("make", "message"), [
    (_empty, lambda p: f"{p} is not a tablet file (it is empty); {GIVE}"),
    (_server_store, lambda p: f"{p} is not a tablet file: it is a camp server store; to check it, use baulk validate "
                              f"--db sqlite:///{p} instead"),
    (_other_database, lambda p: f"{p} is not a tablet file (it is a SQLite database without Baulk's tablet tables); "
                                f"{GIVE}"),
    (_text, lambda p: f"{p} is not a tablet file (it is not a SQLite database); {GIVE}"),
], ids=["empty", "server-store", "other-database", "text"])
def test_anything_but_a_tablet_file_is_refused_untouched(tmp_path: Path, make, message) -> None:  # type: ignore[no-untyped-def]
    path = make(tmp_path)
    assert _inspect(path) == (1, f"Error: {message(path)}\n")


def _tablet_with_a_find(folder: Path) -> TabletStore:
    demo = build_site()
    store = demo_tablet(folder / "tablet.sqlite", demo)
    store.save_find(find=find_data(demo, number=7))
    return store


def test_a_closed_tablet_file_is_read_untouched(tmp_path: Path) -> None:
    _tablet_with_a_find(tmp_path).close()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["tablet.sqlite"]
    code, out = _inspect(tmp_path / "tablet.sqlite")
    assert code == 0 and "integrity: ok\nupgrade steps applied: 0001_initial, " in out
    assert "upgrade steps pending: none (up to date)\n" in out and "  find           1\n" in out


def test_a_tablet_file_the_app_has_open_is_read_through_its_log(tmp_path: Path) -> None:
    """The find saved a moment ago is still only in the write-ahead log; inspect sees it, reading as SQLite's
    readers do, and changes neither the file nor the log."""
    store = _tablet_with_a_find(tmp_path)
    try:
        assert sorted(p.name for p in tmp_path.iterdir()) == ["tablet.sqlite", "tablet.sqlite-shm", "tablet.sqlite-wal"]
        code, out = _inspect(tmp_path / "tablet.sqlite", shared_memory=True)
        assert code == 0 and "  find           1\n" in out
    finally:
        store.close()


def test_a_log_left_without_its_index_is_read_without_making_one(tmp_path: Path) -> None:
    """A tablet that lost power leaves its log beside the file and no shared-memory index: SQLite would make the
    index to read the log, so inspect reads a copy."""
    live, left = tmp_path / "live", tmp_path / "left"
    live.mkdir()
    left.mkdir()
    store = _tablet_with_a_find(live)
    try:
        for name in ("tablet.sqlite", "tablet.sqlite-wal"):
            shutil.copyfile(live / name, left / name)
    finally:
        store.close()
    code, out = _inspect(left / "tablet.sqlite")
    assert code == 0 and "  find           1\n" in out
    assert sorted(p.name for p in left.iterdir()) == ["tablet.sqlite", "tablet.sqlite-wal"]
