"""The curation camp pages over the in-process client: Horizons, Dates, corrections on the find and unit pages,
and Site. Managers write (CSRF token from the form), analysts only read; a refused form comes back with status
400, the field named and nothing written; validation runs again after every change."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from schema.records import AgeDetermination, Correction, Find, Horizon, HorizonAssignment, Unit
from sync_server.app import create_app
from sync_server.curation import list_horizons
from tests.helpers import find_data, seeded_server

FORM = {"content-type": "application/x-www-form-urlencoded"}


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        yield server, demo, http
    server.close()


def _sign_in(http: TestClient, server: Any, role: str) -> str:
    token = server.add_device(label="MGR" if role == "manager" else "AN-1", role=role)[1]
    r = http.post("/camp/sign-in", content=f"token={token}", headers=FORM)
    assert r.status_code == 303, r.text
    return re.search(r'name="csrf" value="([^"]+)"', http.get("/camp/").text).group(1)  # type: ignore[union-attr]


def _post(http: TestClient, path: str, csrf: str, **fields: str) -> Any:
    return http.post(path, data={"csrf": csrf, **fields})


def _count(server: Any) -> dict[str, int]:
    return server.counts()


def test_horizons_page_adds_moves_and_assigns(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http = camp
    csrf = _sign_in(http, server, "manager")
    page = http.get("/camp/horizons")
    assert page.status_code == 200
    rows = re.findall(r'<tr id="h-([^"]+)">\s*<td class="num">(\d+)</td>', page.text)
    assert rows == [("H1", "1"), ("H2", "2"), ("H3", "3"), ("H4", "4")]
    assert f'<a href="/camp/units/{demo.units["202"].id}">202</a> (cut)' in page.text

    r = _post(http, "/camp/horizons/add", csrf, code="H5", label="Basal <gravels>", order="", formation="Vellan Fm",
              member="", bed="")
    assert r.status_code == 303 and r.headers["location"].startswith("/camp/horizons?message=horizon%20H5%20added")
    page = http.get(r.headers["location"]).text
    assert "horizon H5 added at order 5" in page and "Basal &lt;gravels&gt;" in page and "<gravels>" not in page
    assert server.list(Horizon, code="H5")[0].member is None

    r = _post(http, "/camp/horizons/move", csrf, code="H2", direction="up")
    assert r.status_code == 303
    assert [h["code"] for h in list_horizons(server)] == ["H2", "H1", "H3", "H4", "H5"]
    # validation ran again after the answer: the matrix now contradicts the order
    assert "HORIZON_ORDER" in http.get("/camp/checks", params={"code": "HORIZON_ORDER"}).text
    _post(http, "/camp/horizons/move", csrf, code="H2", direction="down")
    assert [h["code"] for h in list_horizons(server)] == ["H1", "H2", "H3", "H4", "H5"]
    assert '<span class="num">0</span> open checks (filtered).' in http.get("/camp/checks", params={"code": "HORIZON_ORDER"}).text

    r = _post(http, "/camp/horizons/assign", csrf, horizon="H2", units="101, 201", reason="same tuff in section",
              by="DM")
    assert r.status_code == 303
    assert server.get(Unit, demo.units["201"].id).horizon_id == demo.horizons["H2"].id
    page = http.get("/camp/horizons").text
    assert re.search(r'<a href="/camp/units/[^"]+">201</a></td><td>H2</td>\s*<td>DM</td><td>same tuff in section</td>',
                     page)
    r = _post(http, "/camp/horizons/assign", csrf, horizon="", units="201", reason="reworked", by="DM")
    assert r.status_code == 303 and server.get(Unit, demo.units["201"].id).horizon_id is None


@pytest.mark.parametrize(("path", "fields", "shown"), [
    ("/camp/horizons/add", {"code": "H1", "label": "Again"},
     "Horizon not added: site VLM already has a horizon H1 (&#39;Upper lake silts&#39;, order 1); choose another code"),
    ("/camp/horizons/add", {"code": "H6", "label": "x", "order": "two"},
     "Horizon not added: form refused, nothing was saved. order: &#39;two&#39; is not a whole number."),
    ("/camp/horizons/assign", {"horizon": "H2", "units": "101", "reason": " ", "by": "DM"},
     "Units not assigned: a horizon assignment needs a reason"),
    ("/camp/horizons/assign", {"horizon": "H2", "units": "101 999", "reason": "r r", "by": "DM"},
     "Units not assigned: site VLM has no unit 999; nothing was assigned."),
    ("/camp/horizons/assign", {"horizon": "H2", "units": "101", "reason": "same tuff", "by": "dm"},
     "assigned_by: string should match pattern"),
    ("/camp/dates/add", {"unit": "101", "method": "radiocarbon", "age_ka": "12", "sigma_ka": "0"},
     "Date not added: date refused, nothing was saved. sigma_ka: 0 is not above 0."),
    ("/camp/dates/add", {"unit": "101", "method": "radiocarbon", "age_ka": "twelve", "sigma_ka": "1"},
     "Date not added: date refused, nothing was saved. age_ka: &#39;twelve&#39; is not a number."),
])
def test_a_refused_form_is_shown_again_with_400_and_nothing_written(camp, path: str, fields: dict[str, str],  # type: ignore[no-untyped-def]
                                                                    shown: str) -> None:
    server, _demo, http = camp
    csrf = _sign_in(http, server, "manager")
    before = _count(server)
    r = _post(http, path, csrf, **fields)
    assert r.status_code == 400
    assert shown in r.text and 'class="card error"' in r.text
    for name, value in fields.items():  # what was typed is still in the form
        if value.strip() and name != "method":
            assert f'name="{name}"' in r.text and f'value="{value}"' in r.text
    assert _count(server) == before


def test_an_analyst_reads_but_gets_no_forms(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http = camp
    flake = server.add(Find(**find_data(demo, number=5)))
    csrf = _sign_in(http, server, "analyst")
    for path in ("/camp/horizons", "/camp/dates", f"/camp/finds/{flake.id}", f"/camp/units/{demo.units['101'].id}",
                 "/camp/site"):
        page = http.get(path)
        assert page.status_code == 200, path
        assert 'method="post"' not in page.text.replace('method="post" action="/camp/sign-out"', ""), path
    before = _count(server)
    for path, fields in (("/camp/horizons/add", {"code": "H9", "label": "x"}),
                         ("/camp/horizons/assign", {"horizon": "H2", "units": "101", "reason": "r r", "by": "AN"}),
                         ("/camp/dates/add", {"unit": "101", "method": "other", "age_ka": "1", "sigma_ka": "1"}),
                         (f"/camp/finds/{flake.id}/correct", {"field": "notes", "value": "x", "reason": "why not"}),
                         (f"/camp/units/{demo.units['101'].id}/correct", {"field": "notes", "value": "x"})):
        r = _post(http, path, csrf, **fields)
        assert r.status_code == 403 and r.json()["message"].startswith("only a manager can"), path
    assert _count(server) == before


LAB = b"""unit,method,age_ka,sigma_ka,lab_code,sample_find_number,note
101,radiocarbon,12.48,0.21,VLM-RC-11,,charcoal <lens>
103,luminescence,1905.5,35,VLM-OSL-3,,
"""


def test_dates_page_adds_and_imports_an_upload(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http = camp
    csrf = _sign_in(http, server, "manager")
    page = http.get("/camp/dates").text
    assert re.search(r"<td>102</td><td>argon_argon</td><td class=\"num\">1871</td><td class=\"num\">4</td>", page)
    assert 'enctype="multipart/form-data"' in page
    r = _post(http, "/camp/dates/add", csrf, unit="301", method="tephra_correlation", age_ka="1870,5", sigma_ka="6",
              lab_code="TC-9", sample_find_number="", note="")
    assert r.status_code == 303 and "date%20added" in r.headers["location"]
    assert server.list(AgeDetermination, lab_code="TC-9")[0].age_ka == 1870.5

    r = http.post("/camp/dates/import", data={"csrf": csrf}, files={"file": ("lab.csv", LAB, "text/csv")})
    assert r.status_code == 303
    page = http.get(r.headers["location"]).text
    assert "imported lab.csv: 2 dates added" in page and "charcoal &lt;lens&gt;" in page
    assert server.count(AgeDetermination) == 5
    r = http.post("/camp/dates/import", data={"csrf": csrf}, files={"file": ("lab.csv", LAB, "text/csv")})
    assert "imported%20lab.csv%3A%200%20dates%20added%2C%202%20already%20held" in r.headers["location"]

    before = _count(server)
    bad = LAB + b"999,radiocarbon,1,0.1,X-9,,\n"
    r = http.post("/camp/dates/import", data={"csrf": csrf}, files={"file": ("C:\\lab\\new.csv", bad, "text/csv")})
    assert r.status_code == 400
    assert ("Nothing imported: new.csv: 1 row refused, nothing was imported.\nline 4: column unit: site VLM has no "
            "unit &#39;999&#39;") in r.text
    r = http.post("/camp/dates/import", data={"csrf": csrf}, files={"file": ("empty.csv", b"", "text/csv")})
    assert r.status_code == 400 and "file: no file was chosen (or it is empty)" in r.text
    assert _count(server) == before
    # a multipart form without the session's token changes nothing either
    r = http.post("/camp/dates/import", data={"csrf": "forged"}, files={"file": ("lab.csv", bad, "text/csv")})
    assert r.status_code == 403 and _count(server) == before


def test_a_find_is_corrected_from_its_page(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http = camp
    flake = server.add(Find(**find_data(demo, number=5)))
    csrf = _sign_in(http, server, "manager")
    page = http.get(f"/camp/finds/{flake.id}").text
    assert "<h2>Corrections</h2>" in page and "No correction made at camp." in page
    assert f'action="/camp/finds/{flake.id}/correct"' in page and '<option value="unit">Unit</option>' in page

    r = _post(http, f"/camp/finds/{flake.id}/correct", csrf, field="unit", value="102",
              reason="section shows it in the <tuff>")
    assert r.status_code == 303
    assert server.get(Find, flake.id).unit_id == demo.units["102"].id
    page = http.get(r.headers["location"]).text
    assert "Corrected: unit 101 -&gt; 102" in page
    assert re.search(r"<td>MGR</td><td>Unit</td><td>section shows it in the &lt;tuff&gt;</td>", page)

    before = _count(server)
    r = _post(http, f"/camp/finds/{flake.id}/correct", csrf, field="weight_g", value="-3", reason="weighed again")
    assert r.status_code == 400
    assert ("Find not corrected: find 5 refused, nothing was saved. weight_g: input should be greater than 0 "
            "(got -3.0).") in r.text
    assert "<h2>History</h2>" in r.text and 'value="-3"' in r.text and '<option value="weight_g" selected>Weight (g)</option>' in r.text
    r = _post(http, f"/camp/finds/{flake.id}/correct", csrf, field="", value="x", reason="weighed again")
    assert r.status_code == 400 and "field: no field was chosen" in r.text
    r = _post(http, f"/camp/finds/{flake.id}/correct", csrf, field="notes", value="x", reason="")
    assert r.status_code == 400 and "needs a reason" in r.text
    assert _count(server) == before
    assert server.list(Correction)[0].by == "MGR"


def test_a_unit_page_shows_its_history_and_takes_a_correction(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http = camp
    csrf = _sign_in(http, server, "manager")
    unit = demo.units["103"]
    _post(http, "/camp/horizons/assign", csrf, horizon="H2", units="103", reason="tuff lens at the top", by="DM")
    page = http.get(f"/camp/units/{unit.id}").text
    assert "<h1>Unit 103</h1>" in page and "<th>Trench</th><td>TR1</td>" in page
    assert re.search(r"<td>H2</td><td>DM</td><td>tuff lens at the top</td>", page)
    r = _post(http, f"/camp/units/{unit.id}/correct", csrf, field="munsell", value="10yr 6/3", reason="daylight")
    assert r.status_code == 303
    assert server.get(Unit, unit.id).munsell == "10YR 6/3"
    assert "Corrected: munsell 10YR 6/4 -&gt; 10YR 6/3" in http.get(r.headers["location"]).text
    r = _post(http, f"/camp/units/{unit.id}/correct", csrf, field="munsell", value="blue", reason="daylight")
    assert r.status_code == 400 and "Unit not corrected: unit 103 refused, nothing was saved. munsell:" in r.text
    r = _post(http, f"/camp/units/{unit.id}/correct", csrf, field="horizon_id", value="H3", reason="daylight")
    assert r.status_code == 400 and "put the unit in a horizon with the horizon assignment" in r.text
    assert server.count(HorizonAssignment) == 1 and server.count(Correction) == 1
    assert http.get("/camp/units/not-an-id").status_code == 404


def test_site_page_draws_the_trenches_and_lists_residuals(camp) -> None:  # type: ignore[no-untyped-def]
    from schema.demo_site import fit_demo_grid
    from sync_server.site_setup import site_summary

    server, demo, http = camp
    server.put(fit_demo_grid(demo)[0])
    _sign_in(http, server, "analyst")
    page = http.get("/camp/site")
    assert page.status_code == 200 and "<h1>Site VLM</h1>" in page.text
    summary = site_summary(server)
    assert page.text.count("<polygon ") == len(summary["trenches"]) == 3
    for cp in summary["control_points"]:
        assert cp["residual_m"] is not None
        assert re.search(rf"<td>{cp['code']}</td>.*?<td class=\"num\">{cp['residual_m']:.4f}</td></tr>", page.text, re.S)
    for t in summary["trenches"]:
        assert f"<td>{t['code']}</td><td class=\"num\">{t['area_m2']:.2f}</td>" in page.text
    assert f"<tr><td>{demo.season.label}</td><td class=\"num\">{demo.season.starts_on}</td>" in page.text
