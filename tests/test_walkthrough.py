"""README's "Your own site", step by step, as a new user runs it: the ``baulk`` command in subprocesses, the camp
server as a real ``baulk serve`` process on loopback, one tablet enrolled and recording through its controllers
(the code behind the tablet's screens). Nothing of the server is imported. The files the export writes are
opened by outside readers: pandas, frictionless and pyogrio (GDAL).
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

README = Path(__file__).resolve().parents[1] / "README.md"


def _readme_section() -> str:
    text = README.read_text()
    return text[text.index("## Your own site"):text.index("## What works today")]


def _block(lang: str) -> str:
    """The first fenced block of ``lang`` in README's "Your own site": the test uses the files README shows."""
    section = _readme_section()
    start = section.index(f"```{lang}\n") + len(lang) + 4
    return section[start:section.index("```", start)]


SETUP = _block("toml")
CONTROL = _block("csv")


def _in_readme(*args: str) -> None:
    """Each command the test runs is written in README's walkthrough as a reader would type it."""
    shown = " ".join(f'"{a}"' if " " in a else a for a in args)
    assert f"baulk {shown}" in _readme_section(), f"README's 'Your own site' does not show: baulk {shown}"


DATES = """\
unit,method,age_ka,sigma_ka,lab_code
2,argon_argon,612.0,5.0,MH-AR-01
"""


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _baulk(*args: str, env: dict[str, str], cwd: Path, ok: tuple[int, ...] = (0,), shown: bool = True) -> str:
    if shown:
        _in_readme(*args)
    r = subprocess.run([sys.executable, "-m", "sync_server.cli", *args], env=env, cwd=cwd, capture_output=True,
                       text=True, timeout=300)
    assert r.returncode in ok, f"baulk {' '.join(args)} exited {r.returncode}:\n{r.stdout}\n{r.stderr}"
    return r.stdout


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    env = {**os.environ, "BAULK_SERVER_DATABASE_URL": f"sqlite:///{tmp_path / 'camp' / 'marl.sqlite'}",
           "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    yield tmp_path, env


def test_your_own_site_from_set_up_file_to_per_horizon_tables(camp) -> None:  # type: ignore[no-untyped-def]
    tmp, env = camp
    (tmp / "site.toml").write_text(SETUP)
    (tmp / "control.csv").write_text(CONTROL)

    # 1. baulk site init: checked whole, then written; the grid fitted from the three control points
    out = _baulk("site", "init", "site.toml", env=env, cwd=tmp)
    assert out.startswith("site MHW (Marl Hollow) set up in sqlite:///")
    assert "season 2027, 4 control points, trenches A, B" in out
    assert "site grid: rotation 3.1" in out
    again = subprocess.run([sys.executable, "-m", "sync_server.cli", "site", "init", "site.toml"], env=env, cwd=tmp,
                           capture_output=True, text=True)
    assert again.returncode == 1 and "this store already holds site MHW (Marl Hollow)" in again.stderr
    show = _baulk("site", "show", "--json", env=env, cwd=tmp, shown=False)
    assert json.loads(show)["site"]["number_block_size"] == 200
    assert "export BAULK_SERVER_DATABASE_URL=sqlite:///" in _readme_section()  # how README names the store once

    # 2. baulk serve, on loopback
    port = _free_port()
    log = (tmp / "serve.log").open("w")
    server = subprocess.Popen([sys.executable, "-m", "sync_server.cli", "serve", "--port", str(port)], env=env,
                              cwd=tmp, stdout=log, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        for _ in range(200):
            try:
                if httpx.get(f"{url}/v1/status", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.1)
        else:
            pytest.fail("baulk serve did not answer: " + (tmp / "serve.log").read_text())
        _walk(tmp, env, url)
    finally:
        server.terminate()
        server.wait(timeout=30)
        log.close()


def _walk(tmp: Path, env: dict[str, str], url: str) -> None:
    from mobile.controllers import CampLink, DayController, FindController, Position, UnitsController
    from mobile.store import TabletStore

    # 3. enrol a tablet: the code from baulk device add --json, typed on the tablet's Camp screen
    _in_readme("device", "add", "--role", "recorder", "--label", "TAB-1")
    added = json.loads(_baulk("device", "add", "--role", "recorder", "--label", "TAB-1", "--json", "--server", url,
                              env=env, cwd=tmp, shown=False))
    assert added["device"]["label"] == "TAB-1" and added["enrol_line"].startswith("baulk-enrol:")
    tablet = TabletStore.open(tmp / "TAB-1.sqlite")
    link = CampLink(tablet)
    link.enrol(added["enrol_line"])
    link.sync()  # the first sync brings the site set-up and a block of 200 numbers
    assert link.numbers_left() == 200

    # 4. record: two units, a relation, five taped finds
    days = DayController(tablet)
    days.start(site_code="MHW", season_label="2027", trench_code="A", recorder="AK")
    units = UnitsController(tablet, days)
    units.save_unit({"code": "1", "kind": "deposit", "description": "pale marl"})
    units.save_unit({"code": "2", "kind": "deposit", "description": "grey tuff"})
    units.relate(upper="1", lower="2", kind="above")
    finds = FindController(tablet, days)
    for i, (unit, category, values) in enumerate([
        ("1", "artifact", {"material": "basalt"}), ("1", "artifact", {"material": "obsidian"}),
        ("1", "fossil", {"material": "bone", "taxon": "Bovidae", "element": "rib"}),
        ("2", "artifact", {"material": "basalt"}), ("2", "artifact", {"material": "chert"}),
    ]):
        days.choose_unit(unit)
        finds.record(category=category, values=values, position=Position(
            "tape", tape_from="MH1", tape_east_m=3.0 + 0.4 * i, tape_north_m=5.0, tape_depth_m=0.3))
    link.sync()

    # 5. horizons and dates at camp, then the checks and the analyst's export
    _baulk("horizon", "add", "H1", "--label", "Marl", env=env, cwd=tmp)
    _baulk("horizon", "add", "H2", "--label", "Grey tuff", env=env, cwd=tmp)
    _baulk("horizon", "assign", "H1", "1", "--reason", "marl over the tuff in the north section", "--by", "DM",
           env=env, cwd=tmp)
    _baulk("horizon", "assign", "H2", "2", "--reason", "the tuff itself", "--by", "DM", env=env, cwd=tmp)
    (tmp / "dates.csv").write_text(DATES)
    _baulk("date", "import", "dates.csv", env=env, cwd=tmp)
    _baulk("validate", "--out", "checks", env=env, cwd=tmp, ok=(0, 1))
    assert {p.name for p in (tmp / "checks").iterdir()} >= {"issues.json", "issues.csv", "age_brackets.json"}
    _baulk("export", "--out", "export", env=env, cwd=tmp)

    # the tablet learns the horizons at its next sync
    link.sync()
    assert {u.code: u.horizon_id is not None for u in units.units()} == {"1": True, "2": True}
    tablet.close()
    _read_back(tmp / "export")


def _read_back(export: Path) -> None:
    """Outside readers: pandas for the counts, frictionless for the data package, pyogrio (GDAL) for the layers."""
    import frictionless
    import pandas as pd
    import pyogrio

    counts = pd.read_csv(export / "counts_by_horizon.csv", keep_default_na=False, dtype={"horizon": str})
    by_horizon = counts.groupby("horizon")["finds"].sum().to_dict()
    assert by_horizon == {"H1": 3, "H2": 2}
    report = frictionless.Package(str(export / "datapackage.json")).validate()  # the Frictionless reference library
    assert report.valid, report.flatten(["type", "message"])
    layers = dict(pyogrio.list_layers(export / "finds.gpkg"))  # GDAL/OGR through pyogrio
    assert layers["finds"] == "Point Z" and layers["trenches"] == "Polygon"
    info = pyogrio.read_info(export / "finds.gpkg", layer="finds")
    assert info["features"] == 5 and "32737" in info["crs"]
