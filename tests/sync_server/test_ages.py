"""``baulk ages`` and the ages files in the export, on the demo's store: the command through click's runner, the
tables read back by pandas, the data packages checked by frictionless (the Frictionless Data reference library),
the pictures opened by Pillow; the Horizons camp page and the demo's summary."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from sync_server.cli import cli

AGE_FILES = ("ages_by_horizon.csv", "ages_by_unit.csv", "ages_by_find.csv", "ranges.csv", "ranges.png",
             "age_depth_TR1.png", "age_depth_TR2.png", "age_depth_TR3.png")


@pytest.fixture(scope="module")
def store(demo_out: Path, tmp_path_factory: pytest.TempPathFactory) -> str:
    db = tmp_path_factory.mktemp("ages") / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    return f"sqlite:///{db}"


@pytest.fixture(scope="module")
def series(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A proxy series through the demo's ages: a value of 1 in 1845-1900 ka, 0 elsewhere, every 2 ka."""
    path = tmp_path_factory.mktemp("series") / "d18o.csv"
    path.write_text("age_ka,value\n" + "".join(f"{a},{1 if 1845 <= a <= 1900 else 0}\n" for a in range(1700, 2101, 2)))
    return path


@pytest.fixture(scope="module")
def ages_out(store: str, series: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    out = tmp_path_factory.mktemp("ages-out") / "ages"
    r = CliRunner().invoke(cli, ["ages", "--db", store, "--series", str(series), "--out", str(out)])
    assert r.exit_code == 0, r.output
    return out, r.output


def test_the_command_prints_the_horizon_ages_and_the_draws(ages_out: tuple[Path, str]) -> None:
    _out, output = ages_out
    lines = output.splitlines()
    assert lines[0].startswith("wrote ") and "ages_by_horizon.csv (4 rows), ages_by_unit.csv (12 rows)" in lines[0]
    assert lines[1] == ("10000 draws (seed 20) over 2 dated units: 102=204=302 (VLM-AR-07) 1871 +- 4 ka; "
                        "104 (VLM-TC-02) 1935 +- 12 ka")
    assert re.fullmatch(r"draws already in order before sampling: \d+\.\d%; Gibbs proposals inside their interval "
                        r"at once: \d+\.\d% \(10 sweeps\)", lines[2])
    assert re.fullmatch(r"H2 Grey tuff marker VL-1: 187\d\.\d ka \(95 %: 18\d\d\.\d-18\d\d\.\d; 68 %: .*\), dated", lines[4])
    # the demo's planted slip (303 above 301) leaves a cycle in the matrix: named, and the ages still come
    assert any(line.startswith("note: the relations among units 102=204=302, 301, 303 go round in a circle") for line in lines)
    assert [line.split(":")[0] for line in lines if line.startswith("series over")] == [
        f"series over H{k}" for k in range(1, 5)]


def test_the_tables_read_back_with_pandas_and_every_horizon_has_an_age(ages_out: tuple[Path, str]) -> None:
    import pandas as pd  # an outside reader of the CSV files

    out, _ = ages_out
    horizons = pd.read_csv(out / "ages_by_horizon.csv")
    assert list(horizons["horizon"]) == ["H1", "H2", "H3", "H4"] and horizons["median_ka"].notna().all()
    assert horizons["median_ka"].is_monotonic_increasing  # older downward
    assert (horizons["lo95_ka"] < horizons["lo68_ka"]).all() and (horizons["hi68_ka"] < horizons["hi95_ka"]).all()
    assert (horizons["draws"] == 10000).all()
    units = pd.read_csv(out / "ages_by_unit.csv", dtype={"unit": str}, keep_default_na=False)
    assert set(units[units["unit"].isin(["102", "204", "302"])]["age_from"]) == {"dated"}
    assert units.set_index("unit").loc["102", "dates"] == "VLM-AR-07"
    finds = pd.read_csv(out / "ages_by_find.csv", dtype={"unit": str})
    assert len(finds) == 378 and finds["median_ka"].notna().sum() > 300  # the demo's counted finds; a cut holds one
    inside = finds[finds["age_from"] == "Z in its unit"]
    unit_ages = units.set_index("unit")
    for _, f in inside.head(20).iterrows():  # a find lies between its unit's top and bottom ages
        u = unit_ages.loc[f["unit"]]
        assert float(u["top_median_ka"]) - 0.5 <= f["median_ka"] <= float(u["bottom_median_ka"]) + 0.5
    ranges = pd.read_csv(out / "ranges.csv", keep_default_na=False)
    assert {"taxon", "material", "category"} == set(ranges["kind"])
    bov = ranges[ranges["name"] == "Bovidae"].iloc[0]
    assert (bov["first_horizon"], bov["last_horizon"], bov["horizons"]) == ("H4", "H1", 4)
    assert float(bov["alpha_one_end"]) == pytest.approx(0.05 ** (-1 / 3) - 1, abs=1e-6)  # Strauss and Sadler, H = 4
    series = pd.read_csv(out / "series_by_horizon.csv")
    assert list(series["horizon"]) == ["H1", "H2", "H3", "H4"]
    by = series.set_index("horizon")  # H2's top and base (95 %: 1848 to 1891 ka) lie inside the 1845-1900 plateau
    assert by.loc["H2", "mean_median"] == 1.0 and by.loc["H2", "min_median"] == 1.0 and by.loc["H2", "sd_median"] == 0
    assert 0 < by.loc["H4", "mean_median"] < 1 and by.loc["H4", "min_median"] == 0 and by.loc["H4", "max_median"] == 1


def test_the_ages_data_package_is_valid_and_a_broken_copy_is_not(ages_out: tuple[Path, str], tmp_path: Path) -> None:
    from frictionless import Package

    out, _ = ages_out
    report = Package(str(out / "datapackage.json")).validate()
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:5]
    broken = tmp_path / "broken"
    shutil.copytree(out, broken)
    text = (broken / "ages_by_horizon.csv").read_text().splitlines()
    text[1] = text[1].replace("Upper lake silts,1,", "Upper lake silts,first,")
    (broken / "ages_by_horizon.csv").write_text("\n".join(text) + "\n")
    assert not Package(str(broken / "datapackage.json")).validate().valid


def test_two_runs_and_the_export_give_the_same_bytes(store: str, ages_out: tuple[Path, str], tmp_path: Path) -> None:
    out, _ = ages_out
    again = tmp_path / "again"
    r = CliRunner().invoke(cli, ["ages", "--db", store, "--out", str(again)])
    assert r.exit_code == 0, r.output
    export = tmp_path / "export"
    r = CliRunner().invoke(cli, ["export", "--db", store, "--out", str(export)])
    assert r.exit_code == 0, r.output
    for name in AGE_FILES:
        assert (again / name).read_bytes() == (out / name).read_bytes() == (export / name).read_bytes(), name
    import json

    package = json.loads((export / "datapackage.json").read_text())
    assert {"ages_by_horizon", "ages_by_unit", "ages_by_find", "ranges"} <= {r["name"] for r in package["resources"]}


def test_the_pictures_open(ages_out: tuple[Path, str]) -> None:
    from PIL import Image  # Pillow reads the PNGs back

    out, _ = ages_out
    for name in AGE_FILES[4:]:
        with Image.open(out / name) as im:
            assert im.format == "PNG" and im.width > 900 and im.height > 600, name


def test_a_date_the_order_cannot_hold_is_named_and_left_out(store: str, tmp_path: Path) -> None:
    db = tmp_path / "server.sqlite"
    shutil.copy(store.removeprefix("sqlite:///"), db)
    url = f"sqlite:///{db}"
    r = CliRunner().invoke(cli, ["date", "add", "101", "--method", "argon_argon", "--age-ka", "2000", "--sigma-ka", "5",
                                 "--lab-code", "BAD-1", "--db", url])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(cli, ["ages", "--db", url, "--out", str(tmp_path / "out")])
    assert r.exit_code == 0, r.output
    (line,) = [x for x in r.output.splitlines() if x.startswith("left out:")]
    assert line.startswith("left out: BAD-1 on unit 101 (2000 +- 5 ka): unit 101 is dated 2000 +- 5 ka but lies above "
                           "unit 102, dated 1871 +- 4 ka: the upper date is older beyond both 2-sigma ranges")
    import pandas as pd

    units = pd.read_csv(tmp_path / "out" / "ages_by_unit.csv", dtype={"unit": str}, keep_default_na=False).set_index("unit")
    assert units.loc["101", "dates"] == "" and units.loc["101", "dates_left_out"].startswith("BAD-1: unit 101 is dated")
    assert units.loc["101", "age_from"] == "extrapolated"


def test_bad_input_is_refused_in_one_line(store: str, tmp_path: Path) -> None:
    missing = tmp_path / "nope.sqlite"
    r = CliRunner().invoke(cli, ["ages", "--db", f"sqlite:///{missing}"])
    assert r.exit_code == 1 and r.output.startswith(f"Error: no Baulk store at {missing}; check the path")
    bad = tmp_path / "series.csv"
    bad.write_text("age_ka,v\n1,2\n")
    r = CliRunner().invoke(cli, ["ages", "--db", store, "--series", str(bad)])
    assert r.exit_code == 1
    assert r.output == (f"Error: {bad}: missing column value; the header must name age_ka, value (found: age_ka, v)\n")
    bad.write_text("age_ka,value\n1,2\n-3,4\n")
    r = CliRunner().invoke(cli, ["ages", "--db", store, "--series", str(bad)])
    assert r.output == (f"Error: {bad}: line 3, column age_ka: -3 is a negative age; ages are in ka before present, "
                        "0 or more\n")


def test_finds_that_may_be_human_remains_get_no_age_from_their_z(store: str) -> None:
    from schema.records import Find
    from sync_server.export_ages import compute_ages
    from sync_server.store import ServerStore

    with ServerStore.open(store, create=False) as s:
        data = s.site_data()
        finds = sorted(s.list(Find, site_id=data.site.id), key=lambda f: f.number)[:3]
    flagged = [finds[0].model_copy(update={"human_remains": True}), *finds[1:]]
    rows = compute_ages(data, flagged, draws=500).rows["ages_by_find"]
    assert rows[0]["location_withheld"] is True and rows[0].get("median_ka") is None
    assert rows[0]["age_from"] == "withheld (possible human remains): see its unit's age"
    assert rows[1]["location_withheld"] is False


def test_the_horizons_page_shows_the_ages(tmp_path: Path) -> None:
    from fastapi.testclient import TestClient

    from sync_server.app import create_app
    from sync_server.export_ages import page_ages
    from tests.helpers import seeded_server

    server, _demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        token = server.add_device(label="AN-1", role="analyst")[1]
        assert http.post("/camp/sign-in", content=f"token={token}",
                         headers={"content-type": "application/x-www-form-urlencoded"}).status_code == 303
        page = http.get("/camp/horizons")
        assert page.status_code == 200
        expected = page_ages(server.site_data())
    server.close()
    text = page.text
    assert '<section id="ages">' in text and "10000 draws, seeded" in text
    for row in expected["rows"]:
        cells = re.search(rf'<tr id="age-{row["code"]}">.*?</tr>', text, re.S)
        assert cells is not None and f'<td class="num">{row["age"].median_ka:.1f}</td>' in cells.group(0)


def test_the_demo_summary_gives_the_horizon_ages(demo_out: Path) -> None:
    summary = (demo_out / "summary.md").read_text()
    (line,) = [x for x in summary.splitlines() if x.startswith("Horizon ages from the order-constrained age model")]
    assert re.search(r"H1 18\d\d\.\d+ \(.*\); H2 187\d\.\d+ \(.*\); H3 19\d\d\.\d+ \(.*\); H4 19\d\d\.\d+ \(", line)
    assert "ages_by_horizon.csv" in summary and "ranges.png" in summary
