"""``baulk survey attach``: the day's download from the instrument matched to finds by number, through the
command, against a real server store (issue 21)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from schema.records import Correction, Find, Shot, StationSetup
from schema.survey import templates as tp
from sync_server.cli import cli
from tests.helpers import find_data, seeded_server

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"
SETUP = EXAMPLES / "survey" / "setup.json"
SHOTS = EXAMPLES / "survey" / "shots.csv"
# tests/sync_server/test_cli_survey.py: the example readings of F-0001 were made from these coordinates
F0001 = (1001.204, 2001.377, 99.812)


@pytest.fixture
def db(tmp_path: Path):  # type: ignore[no-untyped-def]
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    none = dict(e=None, n=None, z=None, position_source="none", position_sigma_m=None)
    server.add(Find(**find_data(demo, number=1)))  # plotted at (1001.25, 2001.5, 99.81): 0.13 m from its point
    for number in (2, 3, 4):
        server.add(Find(**find_data(demo, number=number, **none)))
    server.add(Find(**find_data(demo, number=5, recovery="sieved", **none)))  # sieved: never waits for a point
    server.close()
    return url


def run(url: str, *args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, ["survey", "attach", *args, "--db", url])
    return result.exit_code, result.output


def _finds(url: str) -> dict[int, Find]:
    from sync_server.store import ServerStore

    with ServerStore.open(url) as store:
        return {f.number: f for f in store.list(Find)}


def test_attach_the_example_download_by_number(db) -> None:  # type: ignore[no-untyped-def]
    from sync_server.store import ServerStore

    args = (str(SHOTS), "--setup", str(SETUP), "--prefix", "F-", "--by", "DM")
    # find 1 would move 0.13 m: refused whole, nothing written
    code, out = run(db, *args)
    assert code == 1
    assert out.startswith("Error: 1 point of shots.csv would move its find further than 0.1 m: find 1 by 0.131 m "
                          "(point F-0001, line 2); nothing was written. Check those points")
    assert all(f.shot_id is None for f in _finds(db).values())

    code, out = run(db, *args, "--confirm-moves", "--format", "json")
    assert code == 0, out
    r = json.loads(out)
    assert [(m["point"], m["find"], m["kind"]) for m in r["attached"]] == [
        ("F-0001", 1, "raw"), ("F-0002", 2, "raw"), ("F-0003", 3, "raw")]
    assert r["unmatched"] == [{"point": "LP-101-T1", "line": 5, "why": "not a find number (no prefix 'F-')"}]
    assert r["finds_without_point"] == [4]
    assert r["setup"] == {"station": "CP1", "method": "occupied", "orientation": 71.4215, "angle_unit": "deg",
                          "new": True}
    # the positions are the existing reduction's ('baulk survey reduce' on the same files) ...
    reduced = json.loads(CliRunner().invoke(cli, ["survey", "reduce", str(SETUP), str(SHOTS), "--format", "json"]).output)
    finds = _finds(db)
    for p, n in zip(reduced[:3], (1, 2, 3)):
        assert (finds[n].e, finds[n].n, finds[n].z) == pytest.approx((p["e"], p["n"], p["z"]), abs=1e-9)
    # ... and F-0001 lands where the example's readings were made from
    assert (finds[1].e, finds[1].n, finds[1].z) == pytest.approx(F0001, abs=0.001)
    with ServerStore.open(db) as store:
        shot = store.get(Shot, finds[2].shot_id)
        assert shot.raw_line == "F-0002,325.9471,94.8395,13.145,1.300,0"  # the point's line, kept as received
        setup = store.get(StationSetup, shot.setup_id)
        assert (setup.station_code, setup.e, setup.orientation) == ("CP1", 995.0, 71.4215)
        notes = store.list(Correction, record_id=finds[1].id)
        assert [(c.fields, c.reason, c.by) for c in notes] == [
            ("e,n,z,shot_id", "point F-0001 of shots.csv (raw, setup CP1)", "DM")]
        assert finds[2].position_source == "total_station"
        # written as a version of the server's own device, so tablets pull it like any camp edit
        import sqlalchemy as sa

        from schema.sync.replica import load_identity
        from schema.sync.tables import field_version

        with store.read() as conn:
            me = load_identity(conn).device
            fv = field_version.c
            writers = conn.execute(sa.select(fv.device).where(fv.record_id == finds[2].id, fv.field == "shot_id")).all()
        assert [w[0] for w in writers] == [me]

    # the same download again writes nothing and says so
    code, out = run(db, *args)
    assert code == 0, out
    assert out.splitlines()[:3] == ["setup: over control point CP1, orientation 71.4215 deg",
                                    "attached 0 points of shots.csv to finds:",
                                    "already attached: find 1, find 2, find 3"]
    assert out.splitlines()[3:] == ["unmatched points: 1", "  line 5 point LP-101-T1: not a find number (no prefix 'F-')",
                                    "plotted finds without a position: 4"]


def test_attach_instrument_lines_through_a_template_and_reduced_points(db, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    template = EXAMPLES / "instruments" / "delimited.toml"
    t = tp.load_template(template)
    lines = [tp.encode(t, tp.Observation(325.9471, 94.8395, 13.145, 1.3, 0.0, "deg", "2")),
             tp.encode(t, tp.Observation(332.7871, 91.6054, 23.558, 1.3, 0.0, "deg", "0003"))]
    download = tmp_path / "day.txt"
    download.write_text("\n".join(lines) + "\n")
    code, out = run(db, str(download), "--setup", str(SETUP), "--template", str(template), "--by", "DM")
    assert code == 0, out
    reduced = json.loads(CliRunner().invoke(cli, ["survey", "reduce", str(SETUP), str(SHOTS), "--format", "json"]).output)
    finds = _finds(db)
    for p, n in zip(reduced[1:3], (2, 3)):  # DDD.MMSS to 0.1" and distances to 1 mm: within 1 mm
        assert (finds[n].e, finds[n].n, finds[n].z) == pytest.approx((p["e"], p["n"], p["z"]), abs=0.001)
    assert "plotted finds without a position: 4" in out

    # reduced points (the instrument's own coordinates), the columns named differently
    csv_file = tmp_path / "coords.csv"
    csv_file.write_text("PtID,East,North,Height\n4,1001.5,2001.25,99.8\n77,1000,2000,100\n")
    code, out = run(db, str(csv_file), "--setup", str(SETUP), "--by", "DM", "--column", "point=PtID",
                    "--column", "e=East", "--column", "n=North", "--column", "z=Height")
    assert code == 0, out
    four = _finds(db)[4]
    # the instrument's own coordinates, exactly (no trip through readings), and no shot posing as observed
    assert (four.e, four.n, four.z, four.shot_id, four.position_source) == (1001.5, 2001.25, 99.8, None,
                                                                            "total_station")
    assert four.notes.endswith("[position reduced by the instrument: point 4, line 2 of coords.csv: "
                               "4,1001.5,2001.25,99.8]")
    from sync_server.store import ServerStore

    with ServerStore.open(db) as store:
        assert [(c.fields, c.reason) for c in store.list(Correction, record_id=four.id)] == [
            ("e,n,z,position_source,notes", "point 4 of coords.csv (reduced by the instrument)")]
    assert "  point 4 -> find 4: E 1001.5000  N 2001.2500  Z 99.8000  (reduced; no position before)" in out
    assert "  line 3 point 77: no find 77" in out
    assert "plotted finds without a position: none" in out
    code, out = run(db, str(csv_file), "--setup", str(SETUP), "--by", "DM", "--column", "point=PtID",
                    "--column", "e=East", "--column", "n=North", "--column", "z=Height")
    assert code == 0 and "already attached: find 4" in out, out  # the same reduced point again writes nothing
    assert _finds(db)[4].notes == four.notes


@pytest.mark.parametrize(("content", "extra", "message"), [
    ("id,hz,zenith,slope_distance\nF-0001,1,90,5\n", (),
     "Error: {f}: no target_height column; name it with --column target_height=HEADER, or give the pole height for "
     "every point with --target-height"),
    ("id,hz,zenith,slope_distance,target_height\n1,1.6100,90,5,1.3\n", ("--angle-unit", "dms"),
     "Error: {f} line 2: hz '1.6100': its minutes 61 are not below 60 (read as DDD.MMSS); give --angle-unit if the "
     "file is in another unit"),
    ("id,hz,zenith,slope_distance,target_height\n1,1,90,5,1.3\n1,2,90,5,1.3\n", (),
     "Error: {f} line 3: point '1' is also on line 2; keep one reading per point (delete the one taken in error)"),
    ("a,b\n1,2\n", ("--column", "bearing=a"),
     "Error: --column bearing=...: 'bearing' is not something a download column holds; use one of point, hz, "
     "zenith, slope_distance, target_height, prism_constant_mm, e, n, z"),
])
def test_bad_downloads_are_refused_with_the_fix(db, tmp_path: Path, content: str, extra: tuple[str, ...],
                                                message: str) -> None:  # type: ignore[no-untyped-def]
    f = tmp_path / "dl.csv"
    f.write_text(content)
    code, out = run(db, str(f), "--setup", str(SETUP), "--by", "DM", *extra)
    assert (code, out.strip()) == (1, message.format(f=f))
    assert all(x.shot_id is None for x in _finds(db).values())


def test_the_readme_example_runs_as_written(db, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """README.md, 'Attach the day's download': each command, run in the repository against the store above (finds 1
    plotted 0.13 m off, 2-4 waiting for a point), prints what the README shows (the error joined onto one line)."""
    import shlex

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    block = readme.split("**Attach the day's download.**", 1)[1].split("```", 2)[1]
    runs: list[tuple[list[str], list[str]]] = []
    for line in block.strip().splitlines():
        if line.startswith("$ baulk "):
            runs.append((shlex.split(line[len("$ baulk "):]), []))
        else:
            runs[-1][1].append(line)
    assert len(runs) == 2
    monkeypatch.chdir(Path(__file__).resolve().parents[2])
    for args, expected in runs:
        result = CliRunner().invoke(cli, [*args, "--db", db])
        if expected[0].startswith("Error: "):
            assert result.exit_code == 1
            assert " ".join(result.output.split()) == " ".join(" ".join(expected).split())
        else:
            assert result.exit_code == 0, result.output
            assert result.output.splitlines() == expected
