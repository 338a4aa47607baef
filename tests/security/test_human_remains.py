"""Precise positions of possible human remains stay with those who work the site.

A find flagged ``human_remains`` keeps its E/N/Z, its shot's readings, its GNSS fix and its sample's depths for
recorders and managers; an analyst gets the find unplotted, from a pull, the camp pages and ``GET /v1/issues``,
and no exported file holds them. One rule says what is withheld (``schema.withholding``); these tests walk
every edge that hands finds out.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import uuid
import zipfile
from typing import Any

import pytest

from schema.records import Find, GnssFix, Sample, Shot, StationSetup
from schema.sync import Version, VersionSet
from schema.withholding import FIND_FIELDS, NOTE, POSITION_CHECKS, SEES_POSITIONS, Withheld, withheld, withholds
from sync_server.validation import run_validation
from tests.helpers import find_data, synced_tablet

NOW = dt.datetime(2026, 7, 3, 9, 30, tzinfo=dt.timezone.utc)
# figures found nowhere else in the store, so their absence from an answer's text means something
BURIAL = dict(e=1001.2345, n=2001.6789, z=99.8123)  # inside TR1, unit 101
OUTSIDE = dict(e=1005.4321, n=2001.7890, z=100.4567)  # 1.4 m east of TR1 and 0.46 m above unit 101's top
READINGS = dict(hz=123.4567, zenith=91.2345, slope_distance_m=7.6543)
LAT_LON = dict(lat=-3.1234567, lon=36.9876543)
SAMPLE_Z = dict(top_z=99.7777, bottom_z=99.7011)
SECRETS = ["1001.2345", "2001.6789", "99.8123", "1005.4321", "2001.789", "100.4567", "123.4567", "91.2345", "7.6543",
           "3.1234567", "36.9876543", "99.7777", "99.7011", "1005.432", "100.457"]


@pytest.fixture
def site(camp):  # type: ignore[no-untyped-def]
    """A synced day on TAB-1: a flagged find plotted by a shot, a flagged find plotted by GNSS outside its
    trench and above its unit, a flagged sample with depths, and an ordinary plotted find; validation run."""
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    cp1 = next(c for c in demo.control_points if c.code == "CP1")
    setup = t1.add(StationSetup(site_id=demo.site.id, method="occupied", occupied_point_id=cp1.id, station_code="CP1",
                                e=cp1.e, n=cp1.n, z=cp1.z, instrument_height_m=1.5, orientation=12.5, set_up_at=NOW,
                                recorder="AK"))
    shot = t1.add(Shot(setup_id=setup.id, target_height_m=1.5, shot_at=NOW, raw_line="BKS,123.4567,91.2345,7.6543",
                       **READINGS))
    fix = t1.add(GnssFix(site_id=demo.site.id, raw_sentences=["$GNGGA,fixed"], fix_quality=4, fixed_at=NOW,
                         **LAT_LON))
    plain_shot = t1.add(Shot(setup_id=setup.id, hz=10.0, zenith=90.0, slope_distance_m=12.0, target_height_m=1.5,
                             shot_at=NOW))
    made = {
        "burial": t1.save_find(find=find_data(demo, number=t1.next_find_number(), category="fossil", material="bone",
                                              human_remains=True, shot_id=shot.id, **BURIAL)),
        "outside": t1.save_find(find=find_data(demo, number=t1.next_find_number(), category="fossil", material="bone",
                                               human_remains=True, position_source="gnss", gnss_fix_id=fix.id,
                                               **OUTSIDE)),
        "sample": t1.save_find(find=find_data(demo, number=t1.next_find_number(), category="sample", material="bone",
                                              human_remains=True, e=None, n=None, z=None, position_source="none",
                                              position_sigma_m=None),
                               sample={"purpose": "radiocarbon", "container": "foil + bag", **SAMPLE_Z}),
        "flake": t1.save_find(find=find_data(demo, number=t1.next_find_number(), shot_id=plain_shot.id,
                                             e=1002.5, n=2002.5, z=99.9)),
    }
    assert c1.sync().refused == []
    run_validation(server)
    return {**made, "shot": shot, "fix": fix, "plain_shot": plain_shot, "sample_details": t1.list(Sample)[0],
            "server": server, "demo": demo, "http": http, "tmp": tmp,
            "recorder": _headers(server, "TAB-2", "recorder"),  # another tablet: none is sent back its own versions
            "analyst": _headers(server, "ANALYST", "analyst"), "manager": _headers(server, "MGR", "manager")}


def _headers(server: Any, label: str, role: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {server.add_device(label=label, role=role)[1]}"}


def _pull_all(http: Any, headers: dict[str, str]) -> tuple[list[Version], str]:
    """Every version a device is given, page by page (small pages, so a find's fields cross page ends)."""
    versions: list[Version] = []
    text, after = "", 0
    while True:
        r = http.get("/v1/sync/pull", params={"after": after, "limit": 7}, headers=headers)
        assert r.status_code == 200, r.text
        text += r.text
        body = r.json()
        versions += [Version.model_validate_json(json.dumps(v)) for v in body["versions"]]
        after = body["next"]
        if not body["more"]:
            return versions, text


def test_the_rule_names_who_sees_what() -> None:
    assert SEES_POSITIONS == {"recorder", "manager", "server"}
    assert [withholds(r) for r in ("recorder", "manager", "server", "analyst", "export", "auditor")] == [
        False, False, False, True, True, True]  # a role added later starts without positions
    assert FIND_FIELDS == {"e", "n", "z", "position_source", "position_sigma_m", "shot_id", "gnss_fix_id"}
    assert POSITION_CHECKS == {"POS_OUTSIDE_TRENCH", "POS_FAR_OUTSIDE", "POS_ABOVE_UNIT", "POS_BELOW_UNIT"}


def test_the_rule_is_a_pure_function(demo_site) -> None:  # type: ignore[no-untyped-def]
    shot, fix, sample = uuid.uuid4(), uuid.uuid4(), uuid.uuid4()
    flagged = Find(**find_data(demo_site, human_remains=True, shot_id=shot))
    gnss = Find(**find_data(demo_site, number=2, human_remains=True, position_source="gnss", gnss_fix_id=fix))
    plain = Find(**find_data(demo_site, number=3))
    samples = [Sample(id=sample, find_id=flagged.id, purpose="radiocarbon", container="foil", top_z=99.9)]
    assert withheld("manager", [flagged, gnss, plain], samples) == Withheld()
    hidden = withheld("analyst", [flagged, gnss, plain], samples)
    assert hidden.finds == {flagged.id, gnss.id}
    assert hidden.observations == {("shot", shot), ("gnss_fix", fix)} and hidden.samples == {sample}
    assert [f for f in Find.model_fields if hidden.field("find", flagged.id, f)] == sorted(
        FIND_FIELDS, key=list(Find.model_fields).index)
    assert not any(hidden.field("find", plain.id, f) for f in Find.model_fields)
    assert hidden.field("shot", shot, "hz") and hidden.field("shot", shot, "setup_id") and hidden.field("gnss_fix", fix, "lat")
    assert hidden.field("sample", sample, "top_z") and not hidden.field("sample", sample, "container")
    assert not hidden.field("level_point", flagged.id, "z")  # level points are no find's
    blank = hidden.blanked(flagged)
    assert (blank.e, blank.n, blank.z, blank.position_source, blank.shot_id) == (None, None, None, "none", None)
    assert Find.model_validate(blank.model_dump()).human_remains  # still a valid (unplotted) find
    assert hidden.blanked(plain) is plain
    row = {"code": "POS_OUTSIDE_TRENCH", "record": "find", "record_id": str(flagged.id), "label": "find 1",
           "message": "find 1 at E 1001.250 N 2001.500 is 1.250 m outside trench TR1", "value": "1.25",
           "fix": "check the coordinates, or whether it belongs to another trench"}
    assert hidden.issue(row) == {**row, "value": None, "message": (
        "find 1 fails this check (a plotted find outside its trench outline); its position and the measured values "
        "are withheld: possible human remains")}
    assert hidden.issue({**row, "record_id": str(plain.id)}) == {**row, "record_id": str(plain.id)}
    assert hidden.issue({**row, "code": "UNIT_IS_CUT"}) == {**row, "code": "UNIT_IS_CUT"}


def test_an_analyst_pulls_flagged_finds_unplotted_and_no_observation_that_places_them(site) -> None:  # type: ignore[no-untyped-def]
    http = site["http"]
    flagged = {site[k].id for k in ("burial", "outside", "sample")}
    versions, text = _pull_all(http, site["analyst"])
    assert not [s for s in SECRETS if s in text]
    assert not [v for v in versions if v.record_id in flagged and v.field in FIND_FIELDS]
    assert not [v for v in versions if v.record_id in (site["shot"].id, site["fix"].id)]
    assert not [v for v in versions if v.record == "sample" and v.field in ("top_z", "bottom_z")]
    # the rest of them travels: an analyst's replica shows each flagged find as a valid, unplotted find
    records = VersionSet.of(versions).records()
    for key in ("burial", "outside", "sample"):
        shown = Find.model_validate_json(json.dumps({"id": str(site[key].id), **records[("find", site[key].id)]}))
        assert shown.model_dump(exclude=FIND_FIELDS) == site[key].model_dump(exclude=FIND_FIELDS)
        assert (shown.e, shown.position_source, shown.shot_id, shown.gnss_fix_id) == (None, "none", None, None)
    details = site["sample_details"]
    assert Sample.model_validate_json(json.dumps({"id": str(details.id), **records[("sample", details.id)]})) == \
        details.model_copy(update={"top_z": None, "bottom_z": None})
    # an ordinary find, its shot and the setup (no find's) travel whole
    flake = records[("find", site["flake"].id)]
    assert (flake["e"], flake["n"], flake["z"]) == (1002.5, 2002.5, 99.9)
    assert ("shot", site["plain_shot"].id) in records and ("station_setup", site["plain_shot"].setup_id) in records


@pytest.mark.parametrize("who", ["manager", "recorder"])
def test_managers_and_recorders_pull_every_position(site, who: str) -> None:  # type: ignore[no-untyped-def]
    versions, text = _pull_all(site["http"], site[who])
    assert [s for s in SECRETS[:13] if s not in text] == []
    records = VersionSet.of(versions).records()
    burial = records[("find", site["burial"].id)]
    assert (burial["e"], burial["n"], burial["z"], burial["shot_id"]) == (*BURIAL.values(), str(site["shot"].id))
    assert records[("gnss_fix", site["fix"].id)]["lat"] == LAT_LON["lat"]


def _sign_in(http: Any, headers: dict[str, str]) -> None:
    token = headers["Authorization"].removeprefix("Bearer ")
    r = http.post("/camp/sign-in", content=f"token={token}", follow_redirects=False,
                  headers={"content-type": "application/x-www-form-urlencoded"})
    assert r.status_code == 303, r.text


def test_the_analysts_camp_pages_show_no_position_of_possible_human_remains(site) -> None:  # type: ignore[no-untyped-def]
    http = site["http"]
    pages = [f"/camp/finds/{site[k].id}" for k in ("burial", "outside", "sample")] + [
        "/camp/finds", "/camp/checks", "/camp/conflicts", "/camp/", "/camp/safety"]
    _sign_in(http, site["analyst"])
    seen = {p: http.get(p) for p in pages}
    assert all(r.status_code == 200 for r in seen.values())
    assert {p: [s for s in SECRETS if s in r.text] for p, r in seen.items()} == {p: [] for p in pages}
    burial = seen[pages[0]].text
    assert f"<dt>E (m)</dt><dd>{NOTE}</dd>" in burial and f"<dt>Position from</dt><dd>{NOTE}</dd>" in burial
    assert f"<li>Z (m): <strong>{NOTE}</strong>" in burial  # the history too
    assert f"<li>Total station shot: <strong>{NOTE}</strong>" in burial
    assert "fails this check (a plotted find outside its trench outline)" in seen["/camp/checks"].text
    # the manager sees them all
    http.cookies.clear()
    _sign_in(http, site["manager"])
    assert "<dt>E (m)</dt><dd>1001.235</dd>" in http.get(pages[0]).text  # shown to the millimetre
    checks = http.get("/camp/checks").text
    assert f"find {site['outside'].number} at E 1005.432 N 2001.789" in checks and "Z 100.457" in checks


def test_the_issues_route_gives_an_analyst_position_checks_without_their_numbers(site) -> None:  # type: ignore[no-untyped-def]
    http, outside = site["http"], site["outside"]

    def checks(headers: dict[str, str]) -> dict[str, dict[str, Any]]:
        r = http.get("/v1/issues", headers=headers)
        assert r.status_code == 200
        return {i["code"]: i for i in r.json()["data"] if i["record_id"] == str(outside.id)}

    full, seen = checks(site["manager"]), checks(site["analyst"])
    assert {"POS_OUTSIDE_TRENCH", "POS_ABOVE_UNIT"} <= set(full) and set(seen) == set(full)
    assert "E 1005.432 N 2001.789" in full["POS_OUTSIDE_TRENCH"]["message"] and full["POS_ABOVE_UNIT"]["value"]
    for code in ("POS_OUTSIDE_TRENCH", "POS_ABOVE_UNIT"):
        assert seen[code]["value"] is None and seen[code]["fix"] == full[code]["fix"]
        assert seen[code]["severity"] == full[code]["severity"] and seen[code]["key"] == full[code]["key"]
        assert not [s for s in SECRETS if s in seen[code]["message"]]
    assert seen["POS_ABOVE_UNIT"]["message"] == (
        f"find {outside.number} fails this check (a find above the top of its unit at its position); its position "
        "and the measured values are withheld: possible human remains")


@pytest.mark.parametrize("strict", [False, True])
def test_no_exported_file_places_possible_human_remains(site, strict: bool) -> None:  # type: ignore[no-untyped-def]
    r = site["http"].get("/v1/exports/latest.zip", params={"strict": strict}, headers=site["analyst"])
    assert r.status_code == 200
    with zipfile.ZipFile(io.BytesIO(r.content)) as z:
        texts = {n: z.read(n).decode("utf-8", errors="replace") for n in z.namelist()
                 if n.endswith((".csv", ".json", ".svg"))}
        finds = list(csv.DictReader(io.StringIO(texts["baulk-export/finds.csv"])))
        excluded = list(csv.DictReader(io.StringIO(texts["baulk-export/excluded.csv"])))
    assert {n: [s for s in SECRETS if s in t] for n, t in texts.items()} == {n: [] for n in texts}
    rows = {row["id"]: row for row in finds + excluded}
    assert {str(site[k].id) for k in ("burial", "outside", "sample", "flake")} <= set(rows)
    for key in ("burial", "sample") + (() if strict else ("outside",)):
        row = rows[str(site[key].id)]
        assert (row["e"], row["n"], row["z"], row["location_withheld"]) == ("", "", "", "true")
    assert rows[str(site["flake"].id)]["e"] == "1002.5"
    if strict:  # left out for its position checks, which say so without the numbers
        assert rows[str(site["outside"].id)]["message"].endswith(
            "its position and the measured values are withheld: possible human remains")
