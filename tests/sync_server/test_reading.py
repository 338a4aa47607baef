"""GET /v1/finds and GET /v1/units (issue 16): read routes for managers' and analysts' scripts, paged, filtered
by trench, unit, season and change-log position, ids as dashed UUIDs, possible human remains unplotted for an
analyst."""

from __future__ import annotations

import uuid
from typing import Any

from schema.records import Find
from tests.helpers import find_data


def _auth(server: Any, label: str, role: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {server.add_device(label=label, role=role)[1]}"}


def _finds(server: Any, demo: Any) -> list[Any]:
    tr2 = demo.units["201"]
    made = [server.add(Find(**find_data(demo, number=n))) for n in (3, 1, 2)]
    made.append(server.add(Find(**find_data(demo, number=4, trench_id=tr2.trench_id, unit_id=tr2.id))))
    made.append(server.add(Find(**find_data(demo, number=5, unit_id=demo.units["102"].id, human_remains=True,
                                            e=1001.2345, n=2001.6789))))
    return made


def test_finds_paged_and_filtered_with_dashed_ids(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, _tmp = camp
    made = _finds(server, demo)
    manager = _auth(server, "MGR", "manager")
    r = http.get("/v1/finds", headers=manager)
    assert r.status_code == 200, r.text
    body = r.json()
    assert [f["number"] for f in body["data"]] == [1, 2, 3, 4, 5] and body["count"] == 5
    assert body["data"][0]["id"] == str(made[1].id) and uuid.UUID(body["data"][0]["id"]).hex != body["data"][0]["id"]
    assert [f["number"] for f in http.get("/v1/finds", params={"trench": "TR1"}, headers=manager).json()["data"]] == [
        1, 2, 3, 5]
    assert [f["number"] for f in http.get("/v1/finds", params={"unit": "201"}, headers=manager).json()["data"]] == [4]
    page = http.get("/v1/finds", params={"limit": 2, "offset": 2, "season": demo.season.label}, headers=manager).json()
    assert ([f["number"] for f in page["data"]], page["count"], page["offset"], page["limit"]) == ([3, 4], 5, 2, 2)
    # what changed after a position: one find corrected since
    since = body["position"]
    assert http.get("/v1/finds", params={"changed_after": since}, headers=manager).json()["data"] == []
    server.put(made[0].model_copy(update={"notes": "rolled edge"}))
    later = http.get("/v1/finds", params={"changed_after": since}, headers=manager).json()
    assert [(f["number"], f["notes"]) for f in later["data"]] == [(3, "rolled edge")] and later["position"] > since
    # a filter naming nothing says what there is
    r = http.get("/v1/finds", params={"trench": "TR9"}, headers=manager)
    assert r.status_code == 404
    assert r.json() == {"code": "RecordNotFound", "message": "no trench code is 'TR9' (known: TR1, TR2, TR3); "
                                                             "give one of those"}


def test_who_reads_and_what_an_analyst_is_not_given(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, _tmp = camp
    _finds(server, demo)
    assert http.get("/v1/finds", headers=_auth(server, "TAB-9", "recorder")).status_code == 403
    assert http.get("/v1/units").status_code == 401
    manager = http.get("/v1/finds", params={"unit": "102"}, headers=_auth(server, "MGR", "manager")).json()["data"]
    analyst = http.get("/v1/finds", params={"unit": "102"}, headers=_auth(server, "AN-1", "analyst")).json()["data"]
    assert [(f["number"], f["e"], f["n"]) for f in manager] == [(5, 1001.2345, 2001.6789)]
    assert [(f["number"], f["e"], f["n"], f["z"], f["position_source"]) for f in analyst] == [(5, None, None, None, "none")]


def test_units_by_code_filtered_by_trench_and_season(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, _tmp = camp
    _finds(server, demo)
    analyst = _auth(server, "AN-1", "analyst")
    tr1 = http.get("/v1/units", params={"trench": "TR1"}, headers=analyst).json()
    assert [u["code"] for u in tr1["data"]] == ["101", "102", "103", "104"] and tr1["count"] == 4
    assert tr1["data"][0]["id"] == str(demo.units["101"].id)
    with_finds = http.get("/v1/units", params={"season": demo.season.label}, headers=analyst).json()
    assert [u["code"] for u in with_finds["data"]] == ["101", "102", "201"]
    assert [u["code"] for u in http.get("/v1/units", params={"unit": "203"}, headers=analyst).json()["data"]] == ["203"]
