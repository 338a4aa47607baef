"""The Darwin Core side of ``baulk export``, read back by outside readers: python-dwca-reader (an independent
reader of Darwin Core Archives, from the package registry) opens the archive, every column is held to the cited
copy of the TDWG term list, sieved finds' point-radius georeferences are recomputed with shapely (GEOS) and
pyproj, local dates with Python's IANA time zone database."""

from __future__ import annotations

import csv
import datetime as dt
import json
import shutil
import zoneinfo
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from sync_server.cli import cli

DWC = "http://rs.tdwg.org/dwc/terms/"


@pytest.fixture(scope="module")
def exported(demo_out: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """Two ``baulk export`` runs of one copy of the demo's store, and that store's site."""
    from schema.records import Site
    from sync_server.store import ServerStore

    db = tmp_path_factory.mktemp("dwca") / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    folders = []
    for name in ("first", "second"):
        folder = db.parent / name
        r = CliRunner().invoke(cli, ["export", "--out", str(folder), "--db", f"sqlite:///{db}"])
        assert r.exit_code == 0, r.output
        folders.append(folder)
    with ServerStore.open(f"sqlite:///{db}", upgrade=False) as st:
        site = st.list(Site)[0]
    return {"folder": folders[0], "again": folders[1], "site": site}


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _archive(folder: Path) -> tuple[Any, list[dict[str, str]]]:
    from dwca.read import DwCAReader  # python-dwca-reader, the reference reader

    with DwCAReader(str(folder / "dwc_archive.zip")) as d:
        rows = [{k.removeprefix(DWC): v for k, v in r.data.items()} for r in d]
        fields = sorted((f for f in d.descriptor.core.fields if f.get("index") is not None), key=lambda f: int(f["index"]))
        return (d.descriptor.core.type, [f["term"] for f in fields], d.metadata), rows


def test_the_archive_is_read_by_the_reference_reader_and_holds_every_fossil(exported: dict[str, Any]) -> None:
    (row_type, terms, eml), rows = _archive(exported["folder"])
    assert row_type == DWC + "Occurrence"
    assert eml is not None and "Vellan Lake Margin" in eml.find("dataset/title").text
    fossils = [f for f in _rows(exported["folder"] / "finds.csv") if f["category"] == "fossil"]
    assert len(rows) == len(fossils) == 149  # the demo's counted fossil finds
    assert {r["occurrenceID"] for r in rows} == {f"urn:uuid:{f['id']}" for f in fossils}
    # the archive's core and the data package's dwc_occurrence.csv are the same table
    table = _rows(exported["folder"] / "dwc_occurrence.csv")
    assert list(table[0]) == [t.rsplit("/", 1)[-1] for t in terms]
    assert sorted(table, key=lambda r: r["occurrenceID"]) == sorted(rows, key=lambda r: r["occurrenceID"])


def test_every_column_is_a_term_of_the_published_list(exported: dict[str, Any]) -> None:
    from schema.dwc_termlist import DWC_LIST_VERSION, TERM_IRIS

    (_t, terms, _eml), _rows_ = _archive(exported["folder"])
    # TERM_IRIS: the TDWG Darwin Core List of Terms, version 2026-05-26 (tdwg/dwc dist/simple_dwc_vertical.csv and
    # vocabulary/term_versions.csv, cited in schema/dwc_termlist.py)
    assert DWC_LIST_VERSION == "2026-05-26"
    assert terms and set(terms) <= set(TERM_IRIS.values())
    names = {t.rsplit("/", 1)[-1] for t in terms}
    # the misused term is gone, and the ones the issue asked for are there
    assert "individualCount" not in names
    assert {"objectQuantity", "objectQuantityType", "identificationQualifier", "taxonRank", "countryCode",
            "occurrenceStatus", "minimumElevationInMeters", "verticalDatum", "earliestAgeOrLowestStage",
            "latestAgeOrHighestStage", "formation", "member", "bed"} <= names


def test_values_use_their_terms(exported: dict[str, Any]) -> None:
    site = exported["site"]
    _meta, rows = _archive(exported["folder"])
    finds = {f"urn:uuid:{f['id']}": f for f in _rows(exported["folder"] / "finds.csv")}
    tz = zoneinfo.ZoneInfo("Africa/Nairobi")  # the demo site's zone (IANA time zone database)
    for r in rows:
        f = finds[r["occurrenceID"]]
        # pieces in the bag, in the quantity term for material entities (not individualCount)
        assert (r["objectQuantity"], r["objectQuantityType"]) == (f["count"], "pieces")
        assert r["basisOfRecord"] == "FossilSpecimen" and r["occurrenceStatus"] == "detected"  # the list's vocabulary
        assert r["countryCode"] == "KE"
        found = dt.datetime.fromisoformat(f["found_at"].replace("Z", "+00:00"))
        assert r["eventDate"] == found.astimezone(tz).date().isoformat()
        # excavation labels are not lithostratigraphic names: the demo's horizons have none
        assert r["lithostratigraphicTerms"] == "" and f"unit {f['unit']}" in r["locationRemarks"]
        assert r["geologicalContextID"] == (f"VLM-{f['horizon']}" if f["horizon"] else "")
        if f["z"]:  # elevation: the site datum Z carried to CRS heights by the site's vertical offset
            assert float(r["minimumElevationInMeters"]) == pytest.approx(float(f["z"]) - site.vertical_offset_m, abs=1e-3)
            assert r["verticalDatum"]
    indet = [r for r in rows if r["verbatimIdentification"] == "Mammalia indet."]
    assert indet and all((r["scientificName"], r["identificationQualifier"], r["taxonRank"]) ==
                         ("Mammalia", "indet.", "class") for r in indet)
    families = [r for r in rows if r["scientificName"].endswith("idae")]
    assert families and {r["taxonRank"] for r in families} == {"family"}  # ICZN Art. 29.2: -idae is a family


def test_sieved_fossils_get_the_point_radius_of_their_trench(exported: dict[str, Any]) -> None:
    import pyogrio.raw
    import pyproj
    import shapely

    _meta, rows = _archive(exported["folder"])
    finds = {f"urn:uuid:{f['id']}": f for f in _rows(exported["folder"] / "finds.csv")}
    sieved = [r for r in rows if finds[r["occurrenceID"]]["recovery"] == "sieved"]
    assert len(sieved) == 48 and all(r["decimalLatitude"] for r in sieved)  # 32 % of the fossils, none left blank
    # the trench outlines as GDAL reads them from the GeoPackage (UTM 36S), the smallest enclosing circle by GEOS,
    # to WGS 84 by pyproj: the point and radius of the point-radius method (Chapman & Wieczorek 2020, Georeferencing
    # Best Practices, GBIF, https://doi.org/10.15468/doc-gg7h-s853)
    _m, _f, wkb, (codes,) = pyogrio.raw.read(exported["folder"] / "finds.gpkg", layer="trenches")
    outlines = dict(zip(codes, shapely.from_wkb(wkb)))
    to_wgs84 = pyproj.Transformer.from_crs("EPSG:32736", "EPSG:4326", always_xy=True)
    for r in sieved:
        outline = outlines[finds[r["occurrenceID"]]["trench"]]
        circle = shapely.minimum_bounding_circle(outline)
        lon, lat = to_wgs84.transform(circle.centroid.x, circle.centroid.y)
        assert float(r["decimalLatitude"]) == pytest.approx(lat, abs=1e-7)
        assert float(r["decimalLongitude"]) == pytest.approx(lon, abs=1e-7)
        radius = shapely.minimum_bounding_radius(outline)
        assert radius <= float(r["coordinateUncertaintyInMeters"]) < radius + 0.1
        assert "Chapman" in r["georeferenceProtocol"]
        # its elevation is the spit it was sieved from, as a range
        assert float(r["minimumElevationInMeters"]) < float(r["maximumElevationInMeters"])


def test_stage_names_come_from_the_cited_chart_and_bracket_the_horizon(exported: dict[str, Any]) -> None:
    from schema.chronostrat import CHART, CHART_VERSION

    _meta, rows = _archive(exported["folder"])
    assert CHART_VERSION == "2024-12"
    stages = {u.name: u for u in CHART if u.rank == "Age"}
    ages = {r["horizon"]: r for r in _rows(exported["folder"] / "ages_by_horizon.csv")}
    finds = {f"urn:uuid:{f['id']}": f for f in _rows(exported["folder"] / "finds.csv")}
    named = [r for r in rows if r["earliestAgeOrLowestStage"]]
    assert len(named) == len(rows)  # every demo horizon has an age bracket
    for r in named:
        h = ages[finds[r["occurrenceID"]]["horizon"]]
        old, young = stages[r["earliestAgeOrLowestStage"]], stages[r["latestAgeOrHighestStage"]]
        # the older end of the bracket lies in the earliest stage, the younger end in the latest (ka -> Ma)
        assert old.top_ma < float(h["oldest_hi95_ka"]) / 1000 <= old.base_ma
        assert young.top_ma < float(h["youngest_lo95_ka"]) / 1000 <= young.base_ma
        assert r["earliestEpochOrLowestSeries"] == "Pleistocene"  # the demo's dates, 0.1 to 2.5 Ma


def test_two_exports_of_one_store_give_the_same_archive_and_geopackage(exported: dict[str, Any]) -> None:
    for name in ("dwc_archive.zip", "dwc_occurrence.csv", "finds.gpkg"):
        assert (exported["folder"] / name).read_bytes() == (exported["again"] / name).read_bytes(), name
    manifest = json.loads((exported["folder"] / "manifest.json").read_text())
    assert "dwc_archive.zip" in manifest["files"]


def test_formal_names_go_in_the_lithostratigraphic_terms() -> None:
    """A horizon given formation, member and bed carries them; the excavation labels stay out of those terms."""
    import uuid

    from schema.analysis import Selection
    from schema.records import Find, Horizon, Site, Trench, Unit
    from sync_server.export_geo import dwc_rows

    site = Site(code="XQ", name="Invented Ridge", crs_epsg=32736, timezone="Africa/Nairobi", country_code="KE")
    trench = Trench(site_id=site.id, code="T1", outline=[(0, 0), (2, 0), (2, 1), (0, 1)])
    h = Horizon(site_id=site.id, code="H1", label="Upper sands", order=1, formation="Invented Formation",
                member="Lower Member", bed="Bed 3")
    u = Unit(site_id=site.id, trench_id=trench.id, code="11", kind="deposit", opened_on=dt.date(2026, 7, 1),
             recorder="AK", horizon_id=h.id)
    f = Find(number=1, site_id=site.id, season_id=uuid.uuid4(), trench_id=trench.id, unit_id=u.id, category="fossil",
             material="bone", taxon="Equus sp.", recovery="surface", recorder="AK",
             found_at=dt.datetime(2026, 7, 2, 22, 30, tzinfo=dt.timezone.utc))
    [row] = dwc_rows(site, None, [trench], [u], [h], Selection([f], [], {}), horizon_ages={h.id: (129.0, 780.0)})
    assert (row["formation"], row["member"], row["bed"]) == ("Invented Formation", "Lower Member", "Bed 3")
    assert row["lithostratigraphicTerms"] == "Invented Formation | Lower Member | Bed 3"
    assert "Upper sands" not in row["lithostratigraphicTerms"] and "Upper sands" in row["locationRemarks"]
    assert row["eventDate"] == "2026-07-03"  # 22:30 UTC is 01:30 the next day in Nairobi (UTC+3)
    assert (row["scientificName"], row["identificationQualifier"], row["taxonRank"]) == ("Equus", "sp.", "genus")
    # 129 ka is the Upper Pleistocene's base; 780 ka lies just below the Chibanian's base (774 ka): ICS chart v2024-12
    assert (row["earliestAgeOrLowestStage"], row["latestAgeOrHighestStage"]) == ("Calabrian", "Upper Pleistocene")
    # with no CRS tie there are no coordinates and no elevations, and the row says why
    assert row["decimalLatitude"] is None and row["minimumElevationInMeters"] is None
    assert "not tied" in row["informationWithheld"]


def test_possible_human_remains_get_no_place_at_all() -> None:
    """Not even their trench's point-radius georeference or their spit's elevations (a trench-sized circle is a
    precise location at the scale of a site)."""
    import uuid

    from schema.analysis import Selection
    from schema.records import Find, GridTransform, Site, Spit, Trench, Unit
    from sync_server.export_geo import dwc_rows

    grid = GridTransform(a=1.0, b=0.0, tx=802000.0, ty=9714000.0)  # a plain shift into UTM 36S
    site = Site(code="XQ", name="Invented Ridge", crs_epsg=32736, grid=grid, vertical_offset_m=-1000.0)
    trench = Trench(site_id=site.id, code="T1", outline=[(0, 0), (4, 0), (4, 2), (0, 2)])
    u = Unit(site_id=site.id, trench_id=trench.id, code="11", kind="deposit", opened_on=dt.date(2026, 7, 1),
             recorder="AK")
    spit = Spit(unit_id=u.id, number=1, top_z=100.0, bottom_z=99.9, area_m2=8.0, mesh_mm=4.0)
    common = dict(site_id=site.id, season_id=uuid.uuid4(), trench_id=trench.id, unit_id=u.id, spit_id=spit.id,
                  category="fossil", material="bone", recovery="sieved", recorder="AK",
                  found_at=dt.datetime(2026, 7, 2, 9, tzinfo=dt.timezone.utc))
    sieved = Find(number=1, **common)
    flagged = Find(number=2, human_remains=True, **common)
    rows = {r["catalogNumber"]: r for r in dwc_rows(site, grid, [trench], [u], [], Selection([sieved, flagged], [], {}),
                                                    spits=[spit])}
    plain, hidden = rows["XQ-1"], rows["XQ-2"]
    # the plain sieved find: the trench centre (2, 1) shifted into UTM, radius sqrt(5) = 2.24 m rounded up to 2.3
    assert plain["coordinateUncertaintyInMeters"] == 2.3 and plain["decimalLatitude"] is not None
    assert (plain["minimumElevationInMeters"], plain["maximumElevationInMeters"]) == (1099.9, 1100.0)
    assert plain["samplingProtocol"] == "sieved, 4 mm mesh"
    assert hidden["decimalLatitude"] is None and hidden["coordinateUncertaintyInMeters"] is None
    assert hidden["minimumElevationInMeters"] is None and "human remains" in hidden["informationWithheld"]


def test_fossils_with_photos_name_their_exported_files_in_associated_media(tmp_path: Path) -> None:
    """Issue 19: ``associatedMedia`` lists a fossil's photo files as exported under photos/, joined by " | " (the
    usage comment of dwc:associatedMedia in the Darwin Core List of Terms: "separate the values in a list with space
    vertical bar space ( | )", https://dwc.tdwg.org/list/#dwc_associatedMedia, as quoted in tdwg/dwc issue 337);
    a photo of possible human remains is never named, as its file is never exported. Read back by
    python-dwca-reader, images by Pillow."""
    import hashlib
    import io
    import random

    import httpx
    from dwca.read import DwCAReader  # python-dwca-reader, the reference reader
    from PIL import Image  # Pillow, the reference image reader

    from mobile.photos import save_photo, upload_photos
    from sync_server.app import create_app
    from sync_server.loopback import serve_in_thread
    from tests.helpers import find_data, seeded_server, synced_tablet

    def jpeg(seed: int) -> bytes:
        rnd = random.Random(seed)
        out = io.BytesIO()
        Image.frombytes("RGB", (64, 48), rnd.randbytes(64 * 48 * 3)).save(out, format="JPEG")
        return out.getvalue()

    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    try:
        with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=30) as http:
            tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
            fossil = dict(category="fossil", material="bone", taxon="Bovidae indet.")
            tooth = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), **fossil))
            plain = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), **fossil))
            remains = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), human_remains=True,
                                                      **fossil))
            flake = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))  # an artefact
            for subject, seed in ((tooth, 1), (tooth, 2), (remains, 3), (flake, 4)):
                save_photo(tablet, data=jpeg(seed), subject="find", subject_id=subject.id, site_id=demo.site.id, by="AK")
            client.sync()
            upload_photos(tablet, http, tablet.token())
            tablet.close()
        out = tmp_path / "out"
        r = CliRunner().invoke(cli, ["export", "--out", str(out), "--db", url])
        assert r.exit_code == 0, r.output
    finally:
        server.close()
    with DwCAReader(str(out / "dwc_archive.zip")) as d:
        media = {r.data[DWC + "catalogNumber"]: r.data[DWC + "associatedMedia"] for r in d}
    code = demo.site.code
    assert set(media) == {f"{code}-{f.number}" for f in (tooth, plain, remains)}  # the artefact is no occurrence
    assert media[f"{code}-{tooth.number}"] == (f"photos/find-{tooth.number}_TAB-1-P1.jpg | "
                                               f"photos/find-{tooth.number}_TAB-1-P2.jpg")
    assert media[f"{code}-{plain.number}"] == "" and media[f"{code}-{remains.number}"] == ""
    register = {r["photo"]: r for r in _rows(out / "photo_register.csv")}
    for name in media[f"{code}-{tooth.number}"].split(" | "):  # each named file is in the export, a whole image
        with Image.open(out / name) as img:
            assert img.size == (64, 48)
        photo = name.rsplit("_", 1)[1].removesuffix(".jpg")
        assert hashlib.sha256((out / name).read_bytes()).hexdigest() == register[photo]["sha256"]
    assert register["TAB-1-P3"]["withheld"] == "true" and register["TAB-1-P3"]["file"] == ""
    assert not list((out / "photos").glob(f"find-{remains.number}_*"))
    # the data package's table says the same
    table = {r["catalogNumber"]: r["associatedMedia"] for r in _rows(out / "dwc_occurrence.csv")}
    assert table == media
