"""``baulk site`` and ``baulk season open/close`` through the command line: a real site set up from its file,
control points and trenches changed as versioned edits the tablets pull, bad input refused with nothing written."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from sync_server.cli import cli
from tests.schema.test_setup_file import GOOD, write


def run(*args: str) -> tuple[int, str]:
    r = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return r.exit_code, r.output


@pytest.fixture
def site_db(tmp_path: Path) -> str:
    write(tmp_path)
    url = f"sqlite:///{tmp_path / 'camp' / 'site.sqlite'}"
    code, out = run("site", "init", str(tmp_path / "site.toml"), "--db", url)
    assert code == 0, out
    return url


def test_init_writes_the_set_up_and_prints_the_grid(site_db: str) -> None:
    code, out = run("site", "show", "--db", site_db)
    assert code == 0
    lines = out.splitlines()
    assert lines[0] == "site MHW: Marl Hollow"
    assert lines[1] == "CRS EPSG:32737 (WGS 84 / UTM zone 37S); time zone Africa/Nairobi; country KE"
    assert lines[2] == ("Z tolerance 0.02 m; shoring check from 1.5 m deep; find-number blocks of 300; grid tolerance "
                        "0.02 m")
    assert lines[3] == "seasons: 2027 (2027-06-14 to open)"
    assert lines[4].startswith("site grid: rotation 3.10") and "largest residual 0.000" in lines[4]
    assert "  A        4 corners, 16.00 m2" in lines
    doc = json.loads(run("site", "show", "--json", "--db", site_db)[1])
    assert [c["code"] for c in doc["control_points"]] == ["MH1", "MH2", "MH3", "MH4"]
    assert doc["control_points"][3]["residual_m"] is None  # MH4 is known on the grid only


def test_a_bad_file_creates_no_store(tmp_path: Path) -> None:
    write(tmp_path, GOOD.replace("crs_epsg = 32737", "crs_epsg = 4326"))
    db = tmp_path / "camp" / "site.sqlite"
    code, out = run("site", "init", str(tmp_path / "site.toml"), "--db", f"sqlite:///{db}")
    assert code == 1
    assert "1 problem, nothing was written" in out and "EPSG:4326 (WGS 84) is a geographic CRS" in out
    assert not db.exists() and not db.parent.exists()


def test_init_twice_is_refused(site_db: str, tmp_path: Path) -> None:
    code, out = run("site", "init", str(tmp_path / "site.toml"), "--db", site_db)
    assert code == 1
    assert out == ("Error: this store already holds site MHW (Marl Hollow); a camp store holds one site. Give --db a "
                   "new store for another site, or change this one with baulk site control-point / trench\n")


def test_a_control_point_change_refits_the_grid_and_shows_it(site_db: str) -> None:
    # MH4 gets CRS coordinates 30 cm off the tie: refused over the 2 cm tolerance, then accepted on purpose
    code, out = run("site", "control-point", "MH4", "--e", "520", "--n", "1010", "--z", "51.2",
                    "--crs-e", "171199.5", "--crs-n", "9871269.3", "--db", site_db)
    assert code == 1 and "over the tolerance of 0.02 m" in out and "--accept-residuals" in out
    assert json.loads(run("site", "show", "--json", "--db", site_db)[1])["control_points"][3]["crs_e"] is None
    code, out = run("site", "control-point", "MH4", "--e", "520", "--n", "1010", "--z", "51.2",
                    "--crs-e", "171199.5", "--crs-n", "9871269.3", "--accept-residuals", "--db", site_db)
    assert code == 0, out
    lines = out.splitlines()
    assert lines[0] == "control point MH4 corrected"
    assert lines[1].startswith("before: site grid: rotation 3.10")
    assert lines[2].startswith("after:  site grid: rotation ") and "largest residual" in lines[2]
    assert [ln.split()[0] for ln in lines[3:7]] == ["MH1", "MH2", "MH3", "MH4"]


def test_trenches_are_checked_against_each_other(site_db: str) -> None:
    code, out = run("site", "trench", "C", "--outline", "505,1006 510,1006 510,1010 505,1010", "--db", site_db)
    assert code == 1
    assert out == ("Error: trench C: 1 problem, nothing was written\n  - outline: the outline overlaps trench A by "
                   "2.00 m2; trenches may touch but not overlap: correct one of the two outlines\n")
    code, out = run("site", "trench", "C", "--outline", "506,1004 510,1004 510,1008 506,1008", "--db", site_db)
    assert (code, out) == (0, "trench C added: 4 corners, 16.00 m2\n")
    code, out = run("site", "trench", "C", "--outline", "MH1 MH2 MH9", "--db", site_db)
    assert code == 1 and "control point MH9 not defined" in out


def test_seasons_open_and_close(site_db: str) -> None:
    code, out = run("season", "open", "2028", "--starts", "2028-06-01", "--db", site_db)
    assert (code, out) == (1, "Error: season '2027' is still open; close it first with baulk season close 2027 "
                              "--ends YYYY-MM-DD\n")
    assert run("season", "close", "2027", "--ends", "2027-08-10", "--db", site_db) == (
        0, "season 2027 closed: 2027-06-14 to 2027-08-10\n")
    assert run("season", "open", "2028", "--starts", "2028-06-01", "--db", site_db) == (
        0, "season 2028 opened on 2028-06-01\n")
    code, out = run("season", "open", "2029", "--starts", "1 June", "--db", site_db)
    assert code == 2 and "'1 June' is not a date; write YYYY-MM-DD" in out


def test_the_set_up_travels_to_a_tablet_and_blocks_follow_the_site(site_db: str, tmp_path: Path) -> None:
    """The set-up is versions of the server's own device: an enrolled tablet's first pull brings all of it, and
    its number block has the site's size."""
    import httpx

    from mobile.store import TabletStore
    from mobile.sync import SyncClient
    from schema.records import ControlPoint, Site, Trench
    from sync_server.app import create_app
    from sync_server.loopback import serve_in_thread
    from sync_server.store import ServerStore

    with ServerStore.open(site_db) as server:
        device, token = server.add_device(label="TAB-1", role="recorder")
        block = server.issue_number_block(device_id=device.id)
        assert block.last - block.first + 1 == 300
        with serve_in_thread(create_app(store=server)) as url:
            tablet = TabletStore.open(tmp_path / "t.sqlite")
            tablet.set_identity(device=device)
            tablet.set_token(token)
            with httpx.Client(base_url=url, timeout=30) as http:
                SyncClient(tablet, http, token).sync()
            (site,) = tablet.list(Site)
            assert (site.code, site.number_block_size, site.country_code) == ("MHW", 300, "KE")
            assert site.grid == server.list(Site)[0].grid
            assert sorted(c.code for c in tablet.list(ControlPoint)) == ["MH1", "MH2", "MH3", "MH4"]
            assert sorted(t.code for t in tablet.list(Trench)) == ["A", "B"]
            tablet.close()
