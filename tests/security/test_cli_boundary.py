"""The ``baulk`` command's one error boundary (issue 15, item 6, the command line).

Careless and hostile input given to the real command: a text file or a cut SQLite file where a store or a tablet
file goes, a damaged store, an output path that cannot be written, a setup file with a word or an unknown unit,
bundle and season-archive manifests that are a list, hold null, a word or a number too large for the database.
Each answer is one line naming the file and the fix, exit 1, and never a traceback; a bug in Baulk is one line
naming a report file that holds the traceback, exit 2, unless ``BAULK_DEBUG=1`` asks for the traceback itself.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import shutil
import sqlite3
import subprocess
import sys
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import pytest
from click.testing import CliRunner

from schema.sync import batch_hash
from sync_server.cli import cli
from tests.helpers import demo_tablet, seeded_server

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "survey"
NOT_A_TABLET = "is not a tablet file (it is not a SQLite database); check the path and give the tablet's own .sqlite file"


@dataclass
class Kit:
    """The files of one test: ``store`` a copy of a seeded camp store (a recorder enrolled, its token known)."""

    tmp: Path
    store: Path
    token: str
    device: str
    files: Path

    def db(self, path: Path | None = None) -> list[str]:
        return ["--db", f"sqlite:///{path or self.store}"]


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """Files every case starts from: a camp store with a recorder, a tablet file, a text file, each cut in half,
    and a store with two tables' first pages overwritten (it still opens: the damage shows when they are read)."""
    tmp = tmp_path_factory.mktemp("hostile")
    server, demo = seeded_server(f"sqlite:///{tmp / 'camp.sqlite'}")
    device, token = server.add_device(label="TAB-1", role="recorder")
    server.close()
    demo_tablet(tmp / "tablet.sqlite", demo).close()
    (tmp / "finds.txt").write_text("finds from trench 2, by hand\n")
    for name in ("camp", "tablet"):
        whole = (tmp / f"{name}.sqlite").read_bytes()
        (tmp / f"{name}-cut.sqlite").write_bytes(whole[: len(whole) // 2])
    _damage(tmp / "camp.sqlite", tmp / "camp-damaged.sqlite", tables=("level_point", "safety_check"))
    return {"files": tmp, "token": token, "device": str(device.id)}


def _damage(src: Path, dst: Path, *, tables: tuple[str, ...]) -> None:
    with sqlite3.connect(src) as conn:
        page = conn.execute("PRAGMA page_size").fetchone()[0]
        roots = [conn.execute("SELECT rootpage FROM sqlite_master WHERE name = ?", (t,)).fetchone()[0] for t in tables]
    data = bytearray(src.read_bytes())
    for root in roots:
        data[(root - 1) * page: root * page] = b"\xa5" * page
    dst.write_bytes(bytes(data))


@pytest.fixture
def kit(made: dict[str, Any], tmp_path: Path) -> Kit:
    store = tmp_path / "camp.sqlite"
    shutil.copyfile(made["files"] / "camp.sqlite", store)
    return Kit(tmp_path, store, made["token"], made["device"], made["files"])


# -- crafted bundles and season archives (the formats as README and schema/sync/bundle.py describe them) ------
def _sealed(manifest: dict[str, Any], token: str) -> dict[str, Any]:
    """The manifest with the HMAC-SHA256 seal a tablet puts on it (keyed by the SHA-256 of its token)."""
    key = hashlib.sha256(token.encode()).hexdigest().encode()
    body = json.dumps(manifest, sort_keys=True, separators=(",", ":")).encode()
    return {**manifest, "seal": hmac.new(key, body, hashlib.sha256).hexdigest()}


def _bundle(k: Kit, name: str, batches: Any, *, raw: str | None = None) -> Path:
    manifest = _sealed({"format": "baulk-bundle", "format_version": 1, "device": k.device, "device_label": "TAB-1",
                        "created_at": "2026-07-01T12:00:00+00:00", "batches": batches}, k.token)
    path = k.tmp / name
    with zipfile.ZipFile(path, "w") as z:
        z.writestr("batches/000001.json", "[]")
        z.writestr("manifest.json", json.dumps(manifest) if raw is None else raw)
    return path


def _batch(number: Any) -> list[dict[str, Any]]:
    return [{"batch": number, "versions": 0, "hash": batch_hash([]), "file": "batches/000001.json"}]


def _archive(k: Kit, name: str, *, number_floor: Any = 0, raw: str | None = None) -> Path:
    manifest = {"format": "baulk-season-archive", "format_version": 1, "source": None,
                "created_at": "2026-07-01T12:00:00+00:00", "versions": 0,
                "versions_sha256": hashlib.sha256(b"").hexdigest(), "number_floor": number_floor}
    path = k.tmp / name
    with zipfile.ZipFile(path, "w") as z:
        z.writestr("versions.jsonl", b"")
        z.writestr("manifest.json", json.dumps(manifest) if raw is None else raw)
    return path


def _setup(k: Kit, name: str, **changes: Any) -> Path:
    setup = json.loads((EXAMPLES / "setup.json").read_text())
    path = k.tmp / name
    path.write_text(json.dumps({**setup, **changes}))
    return path


# -- the table: (case, the command's arguments, exit status, the one line it must print) ---------------------
# A line given as a function of the kit is pinned exactly; ``NAMES`` means: this reader belongs to the sync work
# (it is being hardened there), so the line must name the file and nothing more is pinned here.
NAMES = object()
Case = tuple[str, Callable[[Kit], list[str]], int, Any]


def _text(k: Kit) -> Path:
    return k.files / "finds.txt"


CASES: list[Case] = [
    # a text file where a store or a tablet file goes
    ("export/text", lambda k: ["export", "--out", str(k.tmp / "x"), *k.db(_text(k))], 1,
     lambda k: f"{_text(k)} is not a Baulk store (it is not a SQLite database); check --db"),
    ("validate/text", lambda k: ["validate", "--out", str(k.tmp / "v"), *k.db(_text(k))], 1,
     lambda k: f"{_text(k)} is not a Baulk store (it is not a SQLite database); check --db"),
    ("validate-tablet/text", lambda k: ["validate", "--tablet", str(_text(k)), "--out", str(k.tmp / "v")], 1,
     lambda k: f"{_text(k)} {NOT_A_TABLET}"),
    ("safety/text", lambda k: ["safety", *k.db(_text(k))], 1,
     lambda k: f"{_text(k)} is not a Baulk store (it is not a SQLite database); check --db"),
    ("device-list/text", lambda k: ["device", "list", *k.db(_text(k))], 1,
     lambda k: f"{_text(k)} is not a Baulk store (it is not a SQLite database); check --db"),
    ("bundle-export/text", lambda k: ["bundle", "export", "--store", str(_text(k)), "--out", str(k.tmp / "b")], 1,
     lambda k: f"{_text(k)} {NOT_A_TABLET}"),
    ("inspect/text", lambda k: ["inspect", str(_text(k))], 1, lambda k: f"{_text(k)} {NOT_A_TABLET}"),
    # a SQLite file cut in half (a copy that stopped short)
    *[(f"{name}/cut", args, 1, lambda k: f"{k.files / 'camp-cut.sqlite'} is not a Baulk store (SQLite cannot read "
                                         "it: database disk image is malformed); check --db")
      for name, args in [
          ("export", lambda k: ["export", "--out", str(k.tmp / "x"), *k.db(k.files / "camp-cut.sqlite")]),
          ("validate", lambda k: ["validate", "--out", str(k.tmp / "v"), *k.db(k.files / "camp-cut.sqlite")]),
          ("safety", lambda k: ["safety", *k.db(k.files / "camp-cut.sqlite")]),
          ("device-list", lambda k: ["device", "list", *k.db(k.files / "camp-cut.sqlite")]),
      ]],
    *[(f"{name}/cut", args, 1, lambda k: f"{k.files / 'tablet-cut.sqlite'} is not a readable tablet file (database "
                                         "disk image is malformed); keep it and ask the data manager")
      for name, args in [
          ("validate-tablet", lambda k: ["validate", "--tablet", str(k.files / "tablet-cut.sqlite"),
                                         "--out", str(k.tmp / "v")]),
          ("bundle-export", lambda k: ["bundle", "export", "--store", str(k.files / "tablet-cut.sqlite"),
                                       "--out", str(k.tmp / "b")]),
          ("inspect", lambda k: ["inspect", str(k.files / "tablet-cut.sqlite")]),
      ]],
    # a store that opens but whose pages are damaged further in: the boundary names the store
    *[(f"{name}/damaged", args, 1, lambda k: f"{k.files / 'camp-damaged.sqlite'} cannot be used as a database "
                                             "(database disk image is malformed); check that it is the right file; if "
                                             "it is damaged, keep it as it is and use its last good copy (a backup, "
                                             "or a fresh copy from where it came)")
      for name, args in [
          ("export", lambda k: ["export", "--out", str(k.tmp / "x"), *k.db(k.files / "camp-damaged.sqlite")]),
          ("validate", lambda k: ["validate", "--out", str(k.tmp / "v"), *k.db(k.files / "camp-damaged.sqlite")]),
          ("safety", lambda k: ["safety", *k.db(k.files / "camp-damaged.sqlite")]),
      ]],
    # a camp server store where a tablet file goes
    ("bundle-export/server-store", lambda k: ["bundle", "export", "--store", str(k.store), "--out", str(k.tmp / "b")],
     1, lambda k: f"{k.store} is not a tablet file: it is a camp server store; to check it, use baulk validate --db "
                  f"sqlite:///{k.store} instead"),
    # an output path that cannot be written
    *[(name, args, 1, lambda k, shown=shown: f"cannot use {shown}: No such file or directory; check the path, that "
                                             "its folder exists and that you may write there, or give another path")
      for name, args, shown in [
          ("export/out", lambda k: ["export", "--out", "/proc/x", *k.db()], "/proc/x"),
          ("safety/csv", lambda k: ["safety", "--csv", "/proc/x.csv", *k.db()], "/proc/x.csv"),
          ("validate/out", lambda k: ["validate", "--out", "/proc/x", *k.db()], "/proc/x"),
      ]],
    # a setup file with a word for a number, or an angle unit Baulk does not know
    ("survey-reduce/word", lambda k: ["survey", "reduce", str(_setup(k, "setup.json", e="x")),
                                      str(EXAMPLES / "shots.csv")], 1,
     lambda k: f"{k.tmp / 'setup.json'} line 1: e 'x' is not a number; give the station's grid easting in metres as a "
               "JSON number"),
    ("survey-reduce/unit", lambda k: ["survey", "reduce", str(_setup(k, "setup.json", angle_unit="mil")),
                                      str(EXAMPLES / "shots.csv")], 1,
     lambda k: f"{k.tmp / 'setup.json'} line 1: angle_unit 'mil' is not known; use \"deg\" or \"gon\""),
    # bundle manifests: a list, no batches, a word for a batch number, a batch number past every integer column
    ("bundle-import/list", lambda k: ["bundle", "import", str(_bundle(k, "list.baulkbundle", [], raw="[]")), *k.db()],
     1, NAMES),
    ("bundle-import/null", lambda k: ["bundle", "import", str(_bundle(k, "null.baulkbundle", None)), *k.db()], 1, NAMES),
    ("bundle-import/word", lambda k: ["bundle", "import", str(_bundle(k, "word.baulkbundle", _batch("one"))), *k.db()],
     1, NAMES),
    ("bundle-import/2^70", lambda k: ["bundle", "import", str(_bundle(k, "huge.baulkbundle", _batch(2**70))), *k.db()],
     1, NAMES),
    # season-archive manifests: a list, a word for the number floor
    ("season-import/list", lambda k: ["season", "import", str(_archive(k, "list.zip", raw="[]")), *k.db()], 1, NAMES),
    ("season-import/word", lambda k: ["season", "import", str(_archive(k, "word.zip", number_floor="abc")), *k.db()],
     1, NAMES),
]


# ``export`` says what it is doing on stderr as it goes; a store damaged further in is found on the way
PROGRESS_FIRST = {"export/damaged": "[export] reading the site and running every check\n"}


def _file_named(args: list[str]) -> str:
    return next(Path(a).name for a in args if a.endswith((".baulkbundle", ".zip")))


@pytest.mark.parametrize(("case", "args", "status", "line"), CASES, ids=[c[0] for c in CASES])
def test_careless_and_hostile_input_is_one_line(kit: Kit, monkeypatch: pytest.MonkeyPatch, case: str,
                                                args: Callable[[Kit], list[str]], status: int, line: Any) -> None:
    monkeypatch.delenv("BAULK_DEBUG", raising=False)
    argv = args(kit)
    result = CliRunner().invoke(cli, argv, catch_exceptions=False)
    assert (result.exit_code, result.stdout) == (status, ""), result.output
    progress = PROGRESS_FIRST.get(case, "")
    assert result.output == result.stderr and result.stderr.startswith(progress), result.output
    error = result.stderr.removeprefix(progress)
    assert error.count("\n") == 1 and error.endswith("\n"), result.output
    assert "Traceback" not in result.output
    if line is NAMES:
        assert error.startswith("Error: ") and _file_named(argv) in error, error
    else:
        assert error == f"Error: {line(kit)}\n"


def test_a_wrong_file_leaves_the_store_as_it_was(kit: Kit) -> None:
    """A refused bundle changed nothing, and a server store given as a tablet file was not opened for writing."""
    before = kit.store.read_bytes()
    CliRunner().invoke(cli, ["bundle", "import", str(_bundle(kit, "huge.baulkbundle", _batch(2**70))), *kit.db()])
    CliRunner().invoke(cli, ["bundle", "export", "--store", str(kit.store), "--out", str(kit.tmp / "b")])
    assert kit.store.read_bytes() == before


# -- a bug in Baulk --------------------------------------------------------------------------------------------
def _break_device_list(monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(_store: Any) -> list[Any]:
        raise RuntimeError("the device table came back upside down")

    monkeypatch.setattr("sync_server.devices.list_devices", broken)


def test_a_bug_is_one_line_and_a_report_file(kit: Kit, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("BAULK_DEBUG", raising=False)
    monkeypatch.setenv("XDG_STATE_HOME", str(kit.tmp / "state"))
    _break_device_list(monkeypatch)
    result = CliRunner().invoke(cli, ["device", "list", *kit.db()], catch_exceptions=False, prog_name="baulk")
    reports = list((kit.tmp / "state" / "baulk" / "log").glob("baulk-error-*.txt"))
    assert len(reports) == 1
    assert result.exit_code == 2
    assert result.stderr == result.output == (
        "Error: Baulk hit an unexpected problem (RuntimeError: the device table came back upside down); please "
        f"report it with the file {reports[0]}\n")
    text = reports[0].read_text()
    assert text.startswith("Baulk ") and "command: baulk device list" in text
    assert "Traceback (most recent call last)" in text and "RuntimeError: the device table came back upside down" in text


def test_baulk_debug_shows_the_traceback(kit: Kit, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("BAULK_DEBUG", "1")
    monkeypatch.setenv("XDG_STATE_HOME", str(kit.tmp / "state"))
    _break_device_list(monkeypatch)
    with pytest.raises(RuntimeError, match="upside down"):
        CliRunner().invoke(cli, ["device", "list", *kit.db()], catch_exceptions=False)
    assert not (kit.tmp / "state").exists()


# -- through a real process: nothing but the one line reaches stderr -----------------------------------------
def _baulk(args: list[str], *, env: dict[str, str], prelude: str = "") -> subprocess.CompletedProcess[str]:
    code = f"{prelude}\nfrom sync_server.cli import main\nmain()"
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, timeout=120,
                          env={k: v for k, v in {**os.environ, **env}.items() if k != "BAULK_DEBUG"})


def test_no_traceback_reaches_stderr(kit: Kit) -> None:
    bundle = _bundle(kit, "null.baulkbundle", None)
    run = _baulk(["bundle", "import", str(bundle), *kit.db()], env={})
    assert run.returncode == 1 and run.stdout == ""
    assert run.stderr.count("\n") == 1 and run.stderr.startswith("Error: ") and "null.baulkbundle" in run.stderr
    assert "Traceback" not in run.stderr


def test_a_bug_in_a_real_process_keeps_its_traceback_in_the_report(kit: Kit) -> None:
    prelude = ("import sync_server.devices as d\n"
               "def broken(store): raise KeyError('label')\n"
               "d.list_devices = broken")
    run = _baulk(["device", "list", *kit.db()], env={"XDG_STATE_HOME": str(kit.tmp / "state")}, prelude=prelude)
    (report,) = (kit.tmp / "state" / "baulk" / "log").glob("baulk-error-*.txt")
    assert (run.returncode, run.stdout) == (2, "")
    assert run.stderr == (f"Error: Baulk hit an unexpected problem (KeyError: 'label'); please report it with the "
                          f"file {report}\n")
    assert "Traceback (most recent call last)" in report.read_text()
