"""Stores are created on purpose: only ``baulk serve`` and ``baulk site init`` make a server store. Every other
command refuses a missing file, a mistyped folder or another program's database with one line naming the path
and the fix, and leaves everything exactly as it was."""

from __future__ import annotations

import hashlib
import sqlite3
from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from schema.errors import NotABaulkStore, StoreMissing
from sync_server.cli import cli
from sync_server.store import ServerStore, current_revision, head_revision, make_engine, migrate


def _commands(tmp: Path) -> list[list[str]]:
    """Every command that opens an existing server store, with its other arguments."""
    (tmp / "some.file").write_bytes(b"x")
    any_file = str(tmp / "some.file")
    return [
        ["validate", "--out", str(tmp / "report")],
        ["export", "--out", str(tmp / "export")],
        ["safety"],
        ["bundle", "import", any_file],
        ["season", "archive", "--out", str(tmp / "s.zip")],
        ["season", "import", any_file],
        ["device", "add", "--role", "manager", "--label", "DM", "--server", "http://camp:8765"],
        ["device", "list"],
        ["device", "revoke", "TAB-1"],
    ]


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def test_a_mistyped_folder_is_refused_by_every_command_and_nothing_is_created(tmp_path: Path) -> None:
    work = tmp_path / "work"
    work.mkdir()
    db = tmp_path / "camp-2026" / "server.sqlite"  # the folder was mistyped: it does not exist
    for args in _commands(work):
        before = _listing(tmp_path)
        r = CliRunner().invoke(cli, [*args, "--db", f"sqlite:///{db}"])
        assert r.exit_code == 1, (args, r.output)
        assert r.output == (f"Error: no Baulk store at {db} (the folder {db.parent} does not exist); check the path, "
                            f"or create one with baulk site init SETUP --db sqlite:///{db} (or baulk serve)\n"), args
        assert _listing(tmp_path) == before and not db.parent.exists(), args


def test_a_missing_file_is_refused_and_not_created(tmp_path: Path) -> None:
    db = tmp_path / "server.sqlite"
    r = CliRunner().invoke(cli, ["export", "--out", str(tmp_path / "out"), "--db", f"sqlite:///{db}"])
    assert r.exit_code == 1
    assert r.output == (f"Error: no Baulk store at {db}; check the path, or create one with baulk site init SETUP "
                        f"--db sqlite:///{db} (or baulk serve)\n")
    assert _listing(tmp_path) == []


def test_a_relative_path_is_named_in_full(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    r = CliRunner().invoke(cli, ["device", "list", "--db", "sqlite:///servr.sqlite"])
    assert r.exit_code == 1
    assert r.output == (f"Error: no Baulk store at {tmp_path / 'servr.sqlite'}; check the path, or create one with "
                        f"baulk site init SETUP --db sqlite:///{tmp_path / 'servr.sqlite'} (or baulk serve)\n")


def test_a_folder_given_as_the_store_is_refused(tmp_path: Path) -> None:
    r = CliRunner().invoke(cli, ["device", "list", "--db", f"sqlite:///{tmp_path}"])
    assert r.exit_code == 1
    assert r.output == (f"Error: no Baulk store at {tmp_path} (it is a folder); give the store file inside it, or "
                        f"create one with baulk site init SETUP --db sqlite:///{tmp_path} (or baulk serve)\n")


def _foreign(path: Path, *, wal: bool) -> None:
    conn = sqlite3.connect(path)
    if wal:
        conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("CREATE TABLE note (id INTEGER PRIMARY KEY, text TEXT)")
    conn.execute("INSERT INTO note (text) VALUES ('bought more bags')")
    conn.commit()
    conn.close()


def _tables(path: Path) -> list[str]:
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        return sorted(r[0] for r in conn.execute("SELECT name FROM sqlite_master"))
    finally:
        conn.close()


@pytest.mark.parametrize("wal", [False, True], ids=["rollback-journal", "wal"])
def test_another_programs_sqlite_file_is_refused_and_left_as_it_was(tmp_path: Path, wal: bool) -> None:
    db = tmp_path / "other.sqlite"
    _foreign(db, wal=wal)
    work = tmp_path / "work"
    work.mkdir()
    commands = _commands(work)
    before, listing = hashlib.sha256(db.read_bytes()).hexdigest(), _listing(tmp_path)
    assert listing == ["other.sqlite", "work", "work/some.file"]  # no -wal or -shm file left by the writer
    for args in commands:
        r = CliRunner().invoke(cli, [*args, "--db", f"sqlite:///{db}"])
        assert r.exit_code == 1, (args, r.output)
        assert r.output == f"Error: {db} is not a Baulk store (it has no Baulk tables); check --db\n", args
        assert _listing(tmp_path) == listing, args
    assert hashlib.sha256(db.read_bytes()).hexdigest() == before
    assert _tables(db) == ["note"]


def test_an_empty_file_and_a_file_that_is_no_database_are_refused(tmp_path: Path) -> None:
    empty, text = tmp_path / "empty.sqlite", tmp_path / "notes.txt"
    empty.write_bytes(b"")
    text.write_text("TR1 unit 101: grey tuff\n" * 20)
    r = CliRunner().invoke(cli, ["device", "list", "--db", f"sqlite:///{empty}"])
    assert r.exit_code == 1
    assert r.output == f"Error: {empty} is not a Baulk store (it has no Baulk tables); check --db\n"
    r = CliRunner().invoke(cli, ["device", "list", "--db", f"sqlite:///{text}"])
    assert r.exit_code == 1
    assert r.output == f"Error: {text} is not a Baulk store (it is not a SQLite database); check --db\n"
    assert empty.read_bytes() == b"" and text.read_text() == "TR1 unit 101: grey tuff\n" * 20
    assert _listing(tmp_path) == ["empty.sqlite", "notes.txt"]


def test_the_library_refuses_with_the_error_classes(tmp_path: Path) -> None:
    with pytest.raises(StoreMissing):
        ServerStore.open(f"sqlite:///{tmp_path / 'nope' / 's.sqlite'}", create=False)
    _foreign(tmp_path / "other.sqlite", wal=False)
    with pytest.raises(NotABaulkStore):
        ServerStore.open(f"sqlite:///{tmp_path / 'other.sqlite'}", create=False)
    assert _listing(tmp_path) == ["other.sqlite"]


def test_library_callers_still_create_by_default(tmp_path: Path) -> None:
    db = tmp_path / "new" / "server.sqlite"
    ServerStore.open(f"sqlite:///{db}").close()
    assert db.is_file()


def test_a_store_of_an_older_baulk_is_upgraded(tmp_path: Path) -> None:
    db = tmp_path / "server.sqlite"
    engine = make_engine(f"sqlite:///{db}")
    migrate(engine, "0005")  # as an older Baulk left it
    engine.dispose()
    r = CliRunner().invoke(cli, ["device", "add", "--role", "manager", "--label", "DM", "--db", f"sqlite:///{db}",
                                 "--server", "http://camp:8765"])
    assert r.exit_code == 0, r.output
    engine = make_engine(f"sqlite:///{db}")
    assert current_revision(engine) == head_revision()
    engine.dispose()


def test_a_store_of_a_newer_baulk_is_refused_and_left_as_it_was(tmp_path: Path) -> None:
    db = tmp_path / "server.sqlite"
    ServerStore.open(f"sqlite:///{db}").close()
    engine = make_engine(f"sqlite:///{db}")
    with engine.begin() as conn:
        conn.execute(sa.text("UPDATE alembic_version SET version_num = '0999'"))
    engine.dispose()
    before = hashlib.sha256(db.read_bytes()).hexdigest()
    r = CliRunner().invoke(cli, ["device", "list", "--db", f"sqlite:///{db}"])
    assert r.exit_code == 1
    assert r.output == (f"Error: {db} was written by a newer Baulk (schema revision 0999; this Baulk knows up to "
                        f"{head_revision()}); open it with that Baulk or a newer one\n")
    assert hashlib.sha256(db.read_bytes()).hexdigest() == before


def test_an_existing_store_opens_while_the_server_holds_it(tmp_path: Path) -> None:
    """A store in use by ``baulk serve`` (its write-ahead log present) is read as it is, not as immutable."""
    db = tmp_path / "server.sqlite"
    with ServerStore.open(f"sqlite:///{db}") as held:
        held.add_device(label="TAB-1", role="recorder")
        assert Path(f"{db}-wal").exists()
        r = CliRunner().invoke(cli, ["device", "list", "--db", f"sqlite:///{db}"])
        assert r.exit_code == 0, r.output
        assert "TAB-1" in r.output


def test_serve_still_creates_its_store(tmp_path: Path) -> None:
    from fastapi.testclient import TestClient

    from sync_server.app import create_app
    from sync_server.settings import ServerSettings

    db = tmp_path / "camp" / "server.sqlite"
    with TestClient(create_app(ServerSettings(database_url=f"sqlite:///{db}"))) as http:
        assert http.get("/v1/status").status_code == 200
    assert db.is_file()


@pytest.mark.pg
def test_a_postgresql_database_without_baulk_is_refused(pg_database: str) -> None:
    engine = sa.create_engine(pg_database)
    with engine.begin() as conn:
        conn.execute(sa.text("CREATE TABLE note (id integer PRIMARY KEY)"))
    shown = sa.make_url(pg_database).render_as_string(hide_password=True)
    r = CliRunner().invoke(cli, ["device", "list", "--db", pg_database])
    assert r.exit_code == 1
    assert r.output == (f"Error: the PostgreSQL database {shown} is not a Baulk store (it has no alembic_version "
                        f"table); check --db, or create the store with baulk site init SETUP --db {shown} "
                        "(or baulk serve)\n")
    assert sa.inspect(engine).get_table_names() == ["note"]
    engine.dispose()
