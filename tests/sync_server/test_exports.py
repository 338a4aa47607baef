"""Exports of the demo site, each file opened back by an outside reader: frictionless for the data package,
a GDAL-based reader (pyogrio) for the GeoPackage, pandas for the counts, the kept Darwin Core term list."""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from sync_server.cli import cli


@pytest.fixture(scope="module")
def exported(demo_out: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    db = tmp_path_factory.mktemp("export") / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    out = {}
    for mode in ("plain", "strict", "again"):  # "again": a second plain export of the same store (same bytes)
        folder = db.parent / mode
        args = ["export", "--out", str(folder), "--db", f"sqlite:///{db}"] + (["--strict"] if mode == "strict" else [])
        r = CliRunner().invoke(cli, args)
        assert r.exit_code == 0, r.output
        out[mode] = folder
    return out


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


def test_the_data_package_is_valid_and_a_broken_copy_is_not(exported: dict[str, Path], tmp_path: Path) -> None:
    from frictionless import Package  # the Frictionless Data reference library (frictionlessdata.io)

    for folder in (exported["plain"], exported["strict"]):
        report = Package(str(folder / "datapackage.json")).validate()
        assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:5]
    broken = tmp_path / "broken"
    shutil.copytree(exported["plain"], broken)
    with (broken / "counts_by_horizon.csv").open("a") as fh:
        fh.write("H9,artifact,obsidian,plotted,not-a-number,1,,,,,\n")
    report = Package(str(broken / "datapackage.json")).validate()
    assert not report.valid
    assert "type-error" in {e[0] for e in report.flatten(["type"])}


def test_strict_mode_leaves_out_flagged_finds_and_accounts_for_every_one(exported: dict[str, Path]) -> None:
    plain, strict = exported["plain"], exported["strict"]
    m_plain = json.loads((plain / "manifest.json").read_text())
    m_strict = json.loads((strict / "manifest.json").read_text())
    for m, folder in ((m_plain, plain), (m_strict, strict)):
        c = m["counts"]
        assert c["finds_included"] + c["finds_excluded"] == c["finds_total"] == 381  # the demo's finds on the server
        assert len(_rows(folder / "finds.csv")) == c["finds_included"]
        assert len(_rows(folder / "excluded.csv")) == c["finds_excluded"]
    # voided finds are always out; strict also leaves out the finds the checks call errors, each with its code
    assert {r["code"] for r in _rows(plain / "excluded.csv")} == {"VOIDED"}
    strict_codes = {r["code"] for r in _rows(strict / "excluded.csv")}
    assert "VOIDED" in strict_codes and len(strict_codes) > 1
    flagged = [r for r in _rows(plain / "finds.csv") if r["issues"]]
    assert flagged and m_plain["counts"]["finds_included"] > m_strict["counts"]["finds_included"]
    # every file the manifest lists is there with the hash it gives
    import hashlib

    for name, info in m_plain["files"].items():
        assert hashlib.sha256((plain / name).read_bytes()).hexdigest() == info["sha256"], name


def test_counts_match_pandas_groupby_over_the_same_rows(exported: dict[str, Path]) -> None:
    import pandas as pd  # an outside reference for the counting

    folder = exported["plain"]
    finds = pd.read_csv(folder / "finds.csv", keep_default_na=False, dtype={"horizon": str})
    ours = pd.read_csv(folder / "counts_by_horizon.csv", keep_default_na=False, dtype={"horizon": str})
    theirs = finds.groupby(["horizon", "category", "material", "recovery"]).agg(
        finds=("id", "count"), items=("count", "sum")).reset_index()
    merged = ours.merge(theirs, on=["horizon", "category", "material", "recovery"], suffixes=("", "_pd"), how="outer")
    assert len(merged) == len(ours) == len(theirs)
    assert (merged["finds"] == merged["finds_pd"]).all() and (merged["items"] == merged["items_pd"]).all()
    # densities are the counts over the horizon's volume
    vols = pd.read_csv(folder / "volumes.csv", keep_default_na=False, dtype={"horizon": str})
    has_volume = ours[ours["excavated_m3"] != ""]
    assert len(has_volume) > 0
    for _, row in has_volume.iterrows():
        v = pd.to_numeric(vols[vols["horizon"] == row["horizon"]]["excavated_m3"], errors="coerce").sum()
        assert float(row["excavated_m3"]) == pytest.approx(v, rel=1e-6)
        assert float(row["per_m3"]) == pytest.approx(row["finds"] / v, rel=1e-6)


def test_spit_volume_by_hand() -> None:
    import uuid

    from schema.analysis import spit_volume_m3, unit_volumes
    from schema.records import Spit

    # a 1 m2 spit 5 cm thick is 0.05 m3 = 50 L (common practice, no source: it is the definition of the volume)
    s = Spit(unit_id=uuid.uuid4(), number=1, top_z=100.00, bottom_z=99.95, area_m2=1.0, sieved_volume_l=48.0)
    assert spit_volume_m3(s) * 1000 == pytest.approx(50.0)
    two = unit_volumes([s, s.model_copy(update={"id": uuid.uuid4(), "number": 2})])
    assert two[s.unit_id].excavated_m3 == pytest.approx(0.1) and two[s.unit_id].sieved_l == 96.0


def test_the_geopackage_reads_back_with_a_gdal_reader(exported: dict[str, Path], demo_out: Path) -> None:
    import pyogrio  # GDAL/OGR bindings: the outside reader

    gpkg = exported["plain"] / "finds.gpkg"
    layers = {name: gtype for name, gtype in pyogrio.list_layers(gpkg)}
    assert layers == {"finds": "Point Z", "trenches": "Polygon", "level_points": "Point Z"}
    info = pyogrio.read_info(gpkg, layer="finds")
    assert info["crs"] == "EPSG:32736"  # the demo site's CRS: UTM zone 36S
    m = json.loads((exported["plain"] / "manifest.json").read_text())
    assert info["features"] == m["counts"]["geopackage_layers"]["finds"] > 0
    assert pyogrio.read_info(gpkg, layer="trenches")["features"] == 3
    # coordinates: the layer's points are the finds' grid positions carried into UTM by the fitted site grid
    _meta, _fids, geometry, fields = pyogrio.raw.read(gpkg, layer="finds")
    import shapely

    pts = shapely.from_wkb(geometry)
    finds = {r["id"]: r for r in _rows(exported["plain"] / "finds.csv")}
    from schema.records import Site
    from schema.survey.grid import grid_to_crs
    from sync_server.store import ServerStore

    with ServerStore.open(f"sqlite:///{demo_out / 'server.sqlite'}", upgrade=False) as st:
        grid = st.list(Site)[0].grid
    fid = fields[0][0]
    x, y = grid_to_crs(grid, [float(finds[fid]["e"])], [float(finds[fid]["n"])])
    assert shapely.get_x(pts[0]) == pytest.approx(x[0], abs=1e-6)
    assert shapely.get_y(pts[0]) == pytest.approx(y[0], abs=1e-6)
    assert shapely.get_z(pts[0]) == pytest.approx(float(finds[fid]["z"]), abs=1e-9)
    assert 150_000 < x[0] < 850_000 and 1_000_000 < y[0] < 10_000_000  # a UTM easting / southern northing


def test_darwin_core_columns_are_published_terms(exported: dict[str, Path]) -> None:
    from schema.dwc import DWC_TERMS

    with (exported["plain"] / "dwc_occurrence.csv").open() as fh:
        header = next(csv.reader(fh))
    assert header == [t[0] for t in DWC_TERMS]
    rows = _rows(exported["plain"] / "dwc_occurrence.csv")
    assert rows and {r["basisOfRecord"] for r in rows} == {"FossilSpecimen"}
    placed = [r for r in rows if r["decimalLatitude"]]
    assert placed and all(-4 < float(r["decimalLatitude"]) < 0 for r in placed)  # the invented site lies just south of the equator
    assert all(r["geodeticDatum"] == "EPSG:4326" for r in placed)


def test_the_pictures_are_real_images(exported: dict[str, Path]) -> None:
    from PIL import Image  # Pillow reads back what matplotlib wrote
    import xml.etree.ElementTree as ET

    folder = exported["plain"]
    m = json.loads((folder / "manifest.json").read_text())
    pics = m["counts"]["pictures"]
    assert {"harris_matrix.svg", "harris_matrix.png", "plan_TR1.png", "section_TR1.png"} <= set(pics)
    for name in pics:
        if name.endswith(".png"):
            with Image.open(folder / name) as img:
                assert img.format == "PNG" and img.size[0] > 400 and img.size[1] > 300
                assert len(img.convert("RGB").getcolors(1 << 22) or []) > 8, f"{name} is blank"
    svg = ET.parse(folder / "harris_matrix.svg").getroot()
    texts = "".join(svg.itertext())
    assert svg.tag.endswith("svg") and len(list(svg.iter())) > 50  # a drawing, not an empty page
    del texts


def test_matrix_layout_puts_later_units_above_earlier() -> None:
    import uuid

    from schema.records import Relation, Unit
    from schema.strata.matrix import build_matrix
    from sync_server.export_pictures import matrix_layout

    site, trench = uuid.uuid4(), uuid.uuid4()
    import datetime as dt

    units = [Unit(site_id=site, trench_id=trench, code=c, kind="deposit", opened_on=dt.date(2026, 7, 1), recorder="AK")
             for c in ("101", "102", "103", "104")]
    by = {u.code: u for u in units}
    rel = [Relation(site_id=site, kind="above", upper_unit_id=by[a].id, lower_unit_id=by[b].id)
           for a, b in (("101", "102"), ("102", "103"), ("101", "104"), ("104", "103"))]
    m = build_matrix(units, rel)
    assert matrix_layout(m).row_of(m.label) == {"101": 0, "102": 1, "104": 1, "103": 2}
    # a relation typed the wrong way round makes a cycle: its units share one box, the rest still layered
    wrong = rel + [Relation(site_id=site, kind="above", upper_unit_id=by["103"].id, lower_unit_id=by["101"].id)]
    cyclic = build_matrix(units, wrong)
    assert cyclic.reduced is None
    assert matrix_layout(cyclic).row_of(cyclic.label) == {"101 / 102 / 103 / 104": 0}
    extra = Unit(site_id=site, trench_id=trench, code="105", kind="deposit", opened_on=dt.date(2026, 7, 1), recorder="AK")
    loop = [Relation(site_id=site, kind="above", upper_unit_id=by["102"].id, lower_unit_id=by["101"].id),
            rel[0], Relation(site_id=site, kind="above", upper_unit_id=by["101"].id, lower_unit_id=extra.id)]
    m2 = build_matrix([*units, extra], loop)
    assert matrix_layout(m2).row_of(m2.label) == {"101 / 102": 0, "103": 0, "104": 0, "105": 1}


def test_an_analyst_downloads_the_export_and_a_recorder_cannot(demo_out: Path, tmp_path: Path) -> None:
    import io
    import zipfile

    from fastapi.testclient import TestClient

    from sync_server.app import create_app
    from sync_server.store import ServerStore

    db = tmp_path / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    store = ServerStore.open(f"sqlite:///{db}")
    analyst = store.add_device(label="AN-1", role="analyst")[1]
    recorder = store.add_device(label="TAB-X", role="recorder")[1]
    with TestClient(create_app(store=store)) as http:
        r = http.get("/v1/exports/latest.zip", params={"strict": "true"}, headers={"Authorization": f"Bearer {analyst}"})
        assert r.status_code == 200 and r.headers["content-type"] == "application/zip"
        names = set(zipfile.ZipFile(io.BytesIO(r.content)).namelist())
        assert {"baulk-export/manifest.json", "baulk-export/finds.gpkg", "baulk-export/datapackage.json"} <= names
        manifest = json.loads(zipfile.ZipFile(io.BytesIO(r.content)).read("baulk-export/manifest.json"))
        assert manifest["strict"] is True
        refused = http.get("/v1/exports/latest.zip", headers={"Authorization": f"Bearer {recorder}"})
        assert refused.status_code == 403
    store.close()


def test_the_database_tallies_as_the_pure_function_does(demo_out: Path) -> None:
    import uuid

    from schema.analysis import select_finds, tally
    from schema.records import Find, Horizon, Site, Unit
    from schema.strata.validate import validate
    from sync_server.export_sql import tally_in_db
    from sync_server.store import ServerStore

    with ServerStore.open(f"sqlite:///{demo_out / 'server.sqlite'}", upgrade=False) as st:
        site = st.list(Site)[0]
        finds, units, horizons = st.list(Find), st.list(Unit), st.list(Horizon)
        sel = select_finds(finds, validate(st.site_data()).issues, strict=True)
        for by_unit in (False, True):
            with st.read() as conn:
                db = tally_in_db(conn, site_id=site.id, by_unit=by_unit,
                                 exclude=[x.find.id for x in sel.excluded if not x.find.voided])
            assert db == tally(sel.included, units, horizons, by_unit=by_unit)
            assert sum(t.finds for t in db.values()) == len(sel.included)
            with st.read() as conn:  # the season filter (read from the table) gives the same for the one season
                seasons = {f.season_id for f in finds}
                assert tally_in_db(conn, site_id=site.id, by_unit=by_unit, season_ids=seasons,
                                   exclude=[x.find.id for x in sel.excluded if not x.find.voided]) == db
                assert tally_in_db(conn, site_id=site.id, season_ids=[uuid.uuid4()]) == {}


def test_volume_between_surfaces_by_hand() -> None:
    import uuid

    from schema.analysis import surface_volume_m3, unit_volumes
    from schema.records import LevelPoint, Unit

    uid = uuid.uuid4()

    def pts(surface: str, z) -> list[LevelPoint]:  # type: ignore[no-untyped-def]
        return [LevelPoint(unit_id=uid, surface=surface, e=e, n=n, z=z(e, n)) for e, n in ((0, 0), (2, 0), (2, 2), (0, 2))]

    square = [(0.0, 0.0), (2.0, 0.0), (2.0, 2.0), (0.0, 2.0)]
    # flat 0.5 m thick over 2 m x 2 m: 2.0 m3 (hand computation)
    assert surface_volume_m3(pts("top", lambda e, n: 100.0), pts("bottom", lambda e, n: 99.5), square) == pytest.approx(2.0)
    # a top sloping 10 cm per metre in E over a flat bottom: mean thickness 0.6 m, 2.4 m3 (exact for a plane)
    v = surface_volume_m3(pts("top", lambda e, n: 100.0 + 0.1 * e), pts("bottom", lambda e, n: 99.5), square)
    assert v == pytest.approx(2.4, rel=1e-6)
    import datetime as dt

    unit = Unit(id=uid, site_id=uuid.uuid4(), trench_id=uuid.uuid4(), code="901", kind="deposit",
                opened_on=dt.date(2026, 7, 1), recorder="AK")
    vols = unit_volumes([], units=[unit], levels=pts("top", lambda e, n: 100.0) + pts("bottom", lambda e, n: 99.5),
                        outlines={unit.trench_id: square})
    assert vols[uid].excavated_m3 == pytest.approx(2.0) and vols[uid].from_surfaces == 1 and vols[uid].spits == 0


# --- issue 17: correct, complete and joinable, same bytes ------------------------------------------------------


def test_the_same_store_gives_the_same_bytes(exported: dict[str, Path]) -> None:
    a, b = exported["plain"], exported["again"]
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    differ = [n for n in names if (a / n).read_bytes() != (b / n).read_bytes()]
    assert differ == ["manifest.json"]  # the manifest's own time is the one exception
    ma, mb = (json.loads((f / "manifest.json").read_text()) for f in (a, b))
    del ma["created"], mb["created"]
    assert ma == mb


def test_every_record_joins_by_its_codes_and_codes_stay_text(exported: dict[str, Path], tmp_path: Path) -> None:
    import pandas as pd  # the outside reader an analyst would use
    from frictionless import Package  # the Frictionless Data reference library

    folder = exported["plain"]
    package = json.loads((folder / "datapackage.json").read_text())
    resources = {r["name"]: r for r in package["resources"]}
    assert {"seasons", "trenches", "units", "relations", "reduced_matrix", "spits", "samples", "horizons",
            "laboratory_dates", "level_points", "station_setups", "shots", "gnss_fixes", "control_points",
            "codebook"} <= set(resources)
    for name, res in resources.items():  # every code column is typed as text, so unit 101 never loads as 101
        for f in res["schema"]["fields"]:
            if f["name"] in ("unit", "trench", "horizon", "code", "upper_unit", "lower_unit", "season"):
                assert f["type"] == "string", (name, f["name"])
    units = Package(str(folder / "datapackage.json")).get_resource("units").read_rows()
    assert {type(r["code"]) for r in units} == {str} and "101" in {r["code"] for r in units}
    # the joins an analyst makes, by pandas (every code read as text)
    read = lambda n: pd.read_csv(folder / f"{n}.csv", dtype=str, keep_default_na=False)  # noqa: E731
    finds, u, lp, rel = read("finds"), read("units"), read("level_points"), read("relations")
    assert finds.merge(u, left_on="unit", right_on="code", how="left", indicator=True)["_merge"].eq("both").all()
    assert set(lp["unit"]) <= set(u["code"]) and set(rel["upper_unit"]) | set(rel["lower_unit"]) <= set(u["code"])
    assert set(finds["season"]) <= set(read("seasons")["label"])
    assert set(finds.loc[finds["spit_id"] != "", "spit_id"]) <= set(read("spits")["id"])
    shots = set(read("shots")["id"])
    assert set(finds.loc[finds["shot_id"] != "", "shot_id"]) <= shots and shots
    assert set(read("shots")["setup_id"]) <= set(read("station_setups")["id"])
    # finds carry every recorded field of the record model
    from schema.records import Find

    recorded = set(Find.model_fields) - {"site_id", "human_remains", "voided", "void_reason"}
    assert recorded <= set(finds.columns)
    # a broken copy fails: a find naming a unit the units table does not hold
    broken = tmp_path / "broken"
    shutil.copytree(folder, broken)
    text = (broken / "finds.csv").read_text().splitlines()
    head = text[0].split(",")
    cells = text[1].split(",")
    cells[head.index("unit")] = "999"
    (broken / "finds.csv").write_text("\n".join([text[0], ",".join(cells), *text[2:]]) + "\n")
    report = Package(str(broken / "datapackage.json")).validate()
    assert not report.valid and "foreign-key" in {e[0] for e in report.flatten(["type"])}


def test_volumes_by_hand_on_the_demo_trenches(exported: dict[str, Path]) -> None:
    folder = exported["plain"]
    units = {r["code"]: r for r in _rows(folder / "units.csv")}
    vols = _rows(folder / "volumes.csv")
    per_trench: dict[str, float] = {}
    for r in vols:
        if r["excavated_m3"]:
            per_trench[units[r["unit"]]["trench"]] = per_trench.get(units[r["unit"]]["trench"], 0.0) + float(r["excavated_m3"])
    # By hand from the demo's set-up (schema/demo_site.py: outlines and unit thicknesses):
    # TR1 4 m x 3 m = 12 m2, 101-104 are 0.35 + 0.20 + 0.40 + 0.30 = 1.25 m thick: 12 x 1.25 = 15.0 m3
    # TR2 3 m x 3 m = 9 m2, 201, 203, 204, 205 are 0.30 + 0.25 + 0.20 + 0.45 = 1.20 m: 9 x 1.20 = 10.8 m3
    #     (the channel cut 202 has no volume of its own: counting it too gave 13.05 m3, +21 %)
    # TR3 2 m x 5 m = 10 m2, 301-303 are 0.30 + 0.25 + 0.35 = 0.90 m: 10 x 0.90 = 9.0 m3
    assert per_trench == pytest.approx({"TR1": 15.0, "TR2": 10.8, "TR3": 9.0}, rel=1e-6)
    trenches = {r["code"]: float(r["area_m2"]) for r in _rows(folder / "trenches.csv")}
    assert trenches == {"TR1": 12.0, "TR2": 9.0, "TR3": 10.0}
    cut = next(r for r in vols if r["unit"] == "202")
    assert (cut["volume_from"], cut["excavated_m3"], cut["kind"]) == ("cut", "", "cut")
    assert all(r["overlaps"] == "" for r in vols)  # the demo's units stack without sharing space


def test_densities_of_bags_and_items_recomputed_by_pandas(exported: dict[str, Path]) -> None:
    import pandas as pd  # an outside reference for the counting

    folder = exported["plain"]
    finds = pd.read_csv(folder / "finds.csv", dtype={"horizon": str, "unit": str}, keep_default_na=False)
    vols = pd.read_csv(folder / "volumes.csv", dtype={"horizon": str, "unit": str}, keep_default_na=False)
    ours = pd.read_csv(folder / "counts_by_horizon.csv", dtype={"horizon": str}, keep_default_na=False)
    m3 = vols.assign(v=pd.to_numeric(vols["excavated_m3"])).groupby("horizon")["v"].sum()
    litres = vols.assign(v=pd.to_numeric(vols["sieved_l"])).groupby("horizon")["v"].sum()
    theirs = finds.groupby(["horizon", "category", "material", "recovery"]).agg(
        bags_pd=("id", "count"), items_pd=("count", "sum")).reset_index()
    merged = ours.merge(theirs, on=["horizon", "category", "material", "recovery"], how="inner")
    assert len(merged) == len(ours) == len(theirs)
    assert (merged["finds"] == merged["bags_pd"]).all() and (merged["items"] == merged["items_pd"]).all()
    dated = merged[merged["horizon"] != ""]
    for _, r in dated.iterrows():
        assert float(r["bags_per_m3"]) == pytest.approx(r["bags_pd"] / m3[r["horizon"]], rel=1e-6)
        assert float(r["items_per_m3"]) == pytest.approx(r["items_pd"] / m3[r["horizon"]], rel=1e-6)
        assert r["per_m3"] == r["bags_per_m3"]
        if r["recovery"] == "sieved":
            assert float(r["items_per_10l"]) == pytest.approx(r["items_pd"] / litres[r["horizon"]] * 10, rel=1e-6)
            assert float(r["bags_per_10l"]) == pytest.approx(r["bags_pd"] / litres[r["horizon"]] * 10, rel=1e-6)
        else:
            assert r["items_per_10l"] == "" and r["bags_per_10l"] == ""
    sieved = dated[(dated["recovery"] == "sieved") & (dated["items_pd"] > dated["bags_pd"])]
    assert len(sieved) > 0  # bags of several pieces: the two densities differ, and both are there


def test_unit_errors_and_conflicts_mark_finds_and_strict_leaves_them_out(exported: dict[str, Path]) -> None:
    plain, strict = exported["plain"], exported["strict"]
    mp = json.loads((plain / "manifest.json").read_text())["counts"]
    ms = json.loads((strict / "manifest.json").read_text())["counts"]
    rows = _rows(plain / "finds.csv")
    in_cycle = [r for r in rows if "MATRIX_CYCLE" in r["unit_errors"].split()]
    conflicted = [r for r in rows if r["conflicts"]]
    # the demo's merged store holds a planted cycle (102=204=302, 301, 303) and a conflict on a unit's description
    assert in_cycle and len(in_cycle) == mp["finds_with_unit_errors"] == mp["finds_in_matrix_cycles"]
    assert conflicted and len(conflicted) == mp["finds_with_open_conflicts"]
    assert {r["unit"] for r in in_cycle} == {"102", "204", "302", "301", "303"}
    kept = {r["id"] for r in _rows(strict / "finds.csv")}
    assert not kept & {r["id"] for r in in_cycle + conflicted}
    out = _rows(strict / "excluded.csv")
    cyc = [r for r in out if r["code"] == "MATRIX_CYCLE"]
    assert cyc and all(r["applies_to"] == "unit" and r["message"].startswith(f"its unit {r['unit']}: ") for r in cyc)
    assert ms["excluded_by_code"]["MATRIX_CYCLE"] == len(cyc)
    assert sum(ms["excluded_by_reason"].values()) == ms["finds_excluded"] == len(out)
    assert all(r["unit_errors"] == "" and r["conflicts"] == "" for r in _rows(strict / "finds.csv"))


def test_horizons_carry_their_age_brackets_and_the_dates_they_rest_on(exported: dict[str, Path]) -> None:
    rows = {r["code"]: r for r in _rows(exported["plain"] / "horizons.csv")}
    assert [rows[c]["order"] for c in ("H1", "H2", "H3", "H4")] == ["1", "2", "3", "4"]
    # H4 holds 104, dated 1935 +- 12 ka (two sigma: 1911 to 1959, by hand): before, the file read "1863 to ?"
    h4 = rows["H4"]
    assert (h4["youngest_ka"], h4["oldest_ka"]) == ("1911.0", "1959.0")
    assert h4["youngest_from"] == h4["oldest_from"] == "104 (VLM-TC-02 1935 +- 12 ka)"
    assert h4["units"] == "104 303" and h4["dated_units"] == "104"
    assert h4["bracket_note"] == "unit 303 is left out (caught in a matrix cycle)"
    # every unit of H2 is in the planted cycle: no bracket, and the reason says so
    assert rows["H2"]["youngest_ka"] == rows["H2"]["oldest_ka"] == ""
    assert "caught in a matrix cycle" in rows["H2"]["bracket_note"]


def test_the_codebook_and_readme_name_every_code(exported: dict[str, Path]) -> None:
    from schema.strata.issues import CATALOGUE

    folder = exported["plain"]
    book = _rows(folder / "codebook.csv")
    checks = {r["code"]: r["severity"] for r in book if r["kind"] == "check"}
    assert checks == {c: sev for c, (sev, _w) in CATALOGUE.items()}
    assert {r["code"] for r in book if r["kind"] == "export"} == {"VOIDED", "CONFLICT"}
    assert {"deposit", "fill", "cut", "structure"} <= {r["code"] for r in book if r["kind"].startswith("vocabulary:")}
    assert {r["code"] for r in book if r["kind"] == "recorder"} == {"AK", "MO", "JT"}
    text = (folder / "README.md").read_text()
    package = json.loads((folder / "datapackage.json").read_text())
    for res in package["resources"]:
        assert f"### {res['name']}.csv" in text
    assert all(f"| {code} |" in text for code in CATALOGUE)
    assert "items_per_m3" in text and "bags_per_m3" in text


def test_an_export_that_fails_leaves_no_folder_behind(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A download refused part-way (here: a store with no site yet) answers with the reason and removes the
    temporary folder it had made: a camp laptop's disk does not fill with empty export folders."""
    import tempfile

    from fastapi.testclient import TestClient

    from sync_server.app import create_app
    from sync_server.store import ServerStore

    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))
    with ServerStore.open(f"sqlite:///{tmp_path / 'empty.sqlite'}") as store:
        analyst = store.add_device(label="AN-1", role="analyst")[1]
        with TestClient(create_app(store=store)) as http:
            r = http.get("/v1/exports/latest.zip", headers={"Authorization": f"Bearer {analyst}"})
    assert r.status_code == 404 and "no site yet" in r.json()["message"]
    assert list(scratch.iterdir()) == []
