"""Season archives: last season's store carried into this season's; numbering continues, clashes are conflicts."""

from __future__ import annotations

import zipfile
from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from schema.errors import BundleInvalid
from schema.records import Find, Unit
from schema.sync.tables import field_version
from sync_server.cli import cli
from sync_server.seasons import import_archive, write_archive
from sync_server.store import ServerStore
from sync_server.sync import list_conflicts
from tests.helpers import find_data, seeded_server


def _versions(store: ServerStore) -> int:
    with store.read() as conn:
        return int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())


@pytest.fixture
def last_season(tmp_path: Path):  # type: ignore[no-untyped-def]
    """Last season's store: the site, a unit added in the field, three finds numbered from a block of 100."""
    old, demo = seeded_server(f"sqlite:///{tmp_path / 'season-2025.sqlite'}")
    device, _token = old.add_device(label="TAB-1", role="recorder")
    old.issue_number_block(device_id=device.id, size=100)
    unit = old.add(Unit(site_id=demo.site.id, trench_id=demo.trenches["TR1"].id, code="109", kind="deposit",
                        description="ash lens found late in the season", opened_on=demo.season.starts_on, recorder="MO"))
    finds = [old.add(Find(**find_data(demo, number=n, device_id=device.id))) for n in (1, 2, 3)]
    yield old, demo, unit, finds
    old.close()


def test_units_finds_and_numbering_carry_into_a_new_store(last_season, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    old, demo, unit, finds = last_season
    archive = write_archive(old, tmp_path / "2025.zip")
    assert archive["number_floor"] == 100 and archive["versions"] == _versions(old) - _server_owned(old)
    new = ServerStore.open(f"sqlite:///{tmp_path / 'season-2026.sqlite'}")
    r = import_archive(new, tmp_path / "2025.zip")
    assert r["applied"] == archive["versions"] and r["pending_rows"] == 0 and r["conflicts_open"] == 0
    assert new.get(Unit, unit.id).code == "109"
    assert sorted(f.number for f in new.list(Find)) == [1, 2, 3]
    assert [f.id for f in finds] == [new.get(Find, f.id).id for f in finds]
    # numbering continues above everything last season issued (its block ran to 100)
    device, _ = new.add_device(label="TAB-7", role="recorder")
    assert new.issue_number_block(device_id=device.id, size=50).first == 101
    again = import_archive(new, tmp_path / "2025.zip")
    assert again["applied"] == 0 and again["already_held"] == archive["versions"]
    new.close()


def _server_owned(store: ServerStore) -> int:
    from schema.sync import SERVER_OWNED

    with store.read() as conn:
        return int(conn.execute(sa.select(sa.func.count()).select_from(field_version)
                                .where(field_version.c.record.in_(SERVER_OWNED))).scalar_one())


def test_edits_in_both_stores_and_a_reused_number_become_conflicts(last_season, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    old, demo, _unit, finds = last_season
    write_archive(old, tmp_path / "first.zip")
    new = ServerStore.open(f"sqlite:///{tmp_path / 'season-2026.sqlite'}")
    import_archive(new, tmp_path / "first.zip")
    # after the first import both stores go on: the same find re-identified in both, and number 4 used twice
    old.put(old.get(Find, finds[0].id).model_copy(update={"material": "chert"}))
    new.put(new.get(Find, finds[0].id).model_copy(update={"material": "basalt"}))
    four_old = old.add(Find(**find_data(demo, number=4)))
    four_new = new.add(Find(**find_data(demo, number=4, material="quartz")))
    write_archive(old, tmp_path / "second.zip")
    r = import_archive(new, tmp_path / "second.zip")
    assert r["number_clashes"] == 1
    listed = list_conflicts(new)
    kinds = {(c["record_id"], c["field"]): c["kind"] for c in listed}
    first_four = min(str(four_old.id), str(four_new.id))  # one clash, one conflict: under the first of its finds
    assert kinds == {(str(finds[0].id), "material"): "concurrent", (first_four, "number"): "duplicate_number"}
    (clash,) = [c for c in listed if c["kind"] == "duplicate_number"]
    assert sorted(v["record_id"] for v in clash["values"]) == sorted([str(four_old.id), str(four_new.id)])
    assert r["conflicts_open"] == 2
    new.close()


def test_a_damaged_archive_is_refused_whole_and_changes_nothing(last_season, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    old, _demo, _unit, _finds = last_season
    write_archive(old, tmp_path / "a.zip")
    new = ServerStore.open(f"sqlite:///{tmp_path / 'season-2026.sqlite'}")
    before = _versions(new)
    # a changed line inside a valid zip: the hash in the manifest catches it
    with zipfile.ZipFile(tmp_path / "a.zip") as z:
        manifest, lines = z.read("manifest.json"), z.read("versions.jsonl")
    with zipfile.ZipFile(tmp_path / "edited.zip", "w") as z:
        z.writestr("manifest.json", manifest)
        z.writestr("versions.jsonl", lines.replace(b'"obsidian"', b'"flint"', 1))
    with pytest.raises(BundleInvalid, match="does not match its hash; nothing was imported"):
        import_archive(new, tmp_path / "edited.zip")
    raw = (tmp_path / "a.zip").read_bytes()
    (tmp_path / "cut.zip").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(BundleInvalid, match="not a readable season archive"):
        import_archive(new, tmp_path / "cut.zip")
    assert _versions(new) == before
    new.close()


def test_the_season_commands(last_season, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    old, _demo, _unit, _finds = last_season
    runner = CliRunner()
    out = runner.invoke(cli, ["season", "archive", "--out", str(tmp_path / "s.zip"), "--db", old.url])
    assert out.exit_code == 0, out.output
    assert "numbers up to 100" in out.output
    url = f"sqlite:///{tmp_path / 'season-2026.sqlite'}"
    ServerStore.open(url).close()  # this season's empty store, as baulk serve makes it
    out = runner.invoke(cli, ["season", "import", str(tmp_path / "s.zip"), "--db", url])
    assert out.exit_code == 0, out.output
    assert "0 conflicts open" in out.output and "start above 100" in out.output
    (tmp_path / "junk.zip").write_bytes(b"not a zip")
    out = runner.invoke(cli, ["season", "import", str(tmp_path / "junk.zip"), "--db", url])
    assert out.exit_code == 1 and "not a readable season archive" in out.output
