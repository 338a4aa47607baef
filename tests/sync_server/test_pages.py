"""The camp pages over the in-process client: sign-in, refusals, CSRF, Today and settling a conflict."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from schema.records import Find
from sync_server.app import ROUTE_ROLES, create_app
from sync_server.sync import list_conflicts
from tests.helpers import find_data, number_clash, safety_day, seeded_server, synced_tablet, unit_conflict


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        yield server, demo, http, tmp_path
    server.close()


def _sign_in(http: TestClient, token: str) -> str:
    r = http.post("/camp/sign-in", content=f"token={token}", headers={"content-type": "application/x-www-form-urlencoded"})
    assert r.status_code == 303 and r.headers["location"] == "/camp/", r.text
    cookie = r.headers["set-cookie"]
    assert "HttpOnly" in cookie and "SameSite=strict" in cookie.replace("Strict", "strict")
    page = http.get("/camp/")
    return re.search(r'name="csrf" value="([^"]+)"', page.text).group(1)  # type: ignore[union-attr]


def test_every_page_refuses_no_session_and_a_recorder(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    pages = [k for k, v in ROUTE_ROLES.items() if v.startswith("page")]
    assert len(pages) >= 4
    for key in pages:
        method, path = key.split(" ", 1)
        r = http.request(method, path.replace("{find_id}", "00000000-0000-0000-0000-000000000001"))
        assert r.status_code == 303 and r.headers["location"] == "/camp/sign-in", key
    recorder = server.add_device(label="TAB-1", role="recorder")[1]
    r = http.post("/camp/sign-in", content=f"token={recorder}", headers={"content-type": "application/x-www-form-urlencoded"})
    assert r.status_code == 401 and "token cannot open the camp pages" in r.text
    assert "set-cookie" not in r.headers
    # a forged cookie is no session
    http.cookies.set("baulk_camp", "e30.forged", path="/camp")
    assert http.get("/camp/").status_code == 303


def test_forms_without_the_csrf_token_are_refused(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    manager = server.add_device(label="MGR", role="manager")[1]
    csrf = _sign_in(http, manager)
    form = {"content-type": "application/x-www-form-urlencoded"}
    posts = [k.split(" ", 1)[1] for k, v in ROUTE_ROLES.items() if k.startswith("POST /camp/") and v.startswith("page")]
    assert {"/camp/sign-out", "/camp/conflicts/resolve", "/camp/checks/accept"} <= set(posts)
    for path in posts:
        for body in ("csrf=wrong", "", f"csrf={csrf}x"):
            r = http.post(path, content=body, headers=form)
            assert r.status_code == 403 and "reload the page" in r.json()["message"], (path, body)
    assert http.get("/camp/").status_code == 200  # still signed in: nothing happened
    r = http.post("/camp/sign-out", content=f"csrf={csrf}", headers=form)
    assert r.status_code == 303 and r.headers["location"] == "/camp/sign-in"


def test_today_lists_devices_and_new_finds(camp) -> None:  # type: ignore[no-untyped-def]
    import datetime as dt

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number(), found_at=dt.datetime.now(dt.timezone.utc)))
    c1.sync()
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get("/camp/").text
    assert "TAB-1" in page and "MGR" in page and re.search(r"<td>TR1</td><td>101</td><td class=\"num\">1</td>", page)


def test_a_manager_settles_a_conflict_from_the_page_and_an_analyst_cannot(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t2, c2 = synced_tablet(server, http, tmp, "TAB-2")
    find = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    unit_conflict(demo, (t1, c1), (t2, c2), find)
    analyst = server.add_device(label="AN-1", role="analyst")[1]
    csrf = _sign_in(http, analyst)
    page = http.get("/camp/conflicts").text
    assert "Only a manager can settle it." in page and "102" in page and "103" in page
    form = {"content-type": "application/x-www-form-urlencoded"}
    body = f"csrf={csrf}&record=find&record_id={find.id}&field=unit_id&choice=%22{demo.units['102'].id}%22"
    assert http.post("/camp/conflicts/resolve", content=body, headers=form).status_code == 403
    http.cookies.clear()
    csrf = _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get("/camp/conflicts").text
    assert f'value="{find.id}"' in page
    body = f"csrf={csrf}&record=find&record_id={find.id}&field=unit_id&choice=%22{demo.units['102'].id}%22"
    r = http.post("/camp/conflicts/resolve", content=body, headers=form)
    assert r.status_code == 303 and "settled" in r.headers["location"]
    assert list_conflicts(server) == []
    c2.sync()
    assert t2.get(Find, find.id).unit_id == demo.units["102"].id  # the resolution reached the tablet


def test_checks_finds_matrix_and_exports_pages(camp) -> None:  # type: ignore[no-untyped-def]
    import io
    import zipfile

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    low = t1.save_find(find=find_data(demo, number=t1.next_find_number(), z=99.30))  # below its unit: a check
    c1.sync()
    csrf = _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get("/camp/checks", params={"code": "POS_BELOW_UNIT"}).text
    assert "POS_BELOW_UNIT" in page and f'href="/camp/finds/{low.id}"' in page
    key = re.search(r'name="key" value="([^"]+)"', page).group(1)  # type: ignore[union-attr]
    form = {"content-type": "application/x-www-form-urlencoded"}
    r = http.post("/camp/checks/accept", content=f"csrf={csrf}&key={key}&reason=bioturbation+seen+in+section", headers=form)
    assert r.status_code == 303 and "accepted" in r.headers["location"]
    assert "Accepted by MGR: bioturbation seen in section" in http.get("/camp/checks").text
    assert f"/camp/finds/{low.id}" in http.get("/camp/finds", params={"q": str(low.number)}).text
    history = http.get(f"/camp/finds/{low.id}").text
    assert "TAB-1" in history and "99.3" in history
    png = http.get("/camp/matrix.png")
    assert png.status_code == 200 and png.content[:8] == b"\x89PNG\r\n\x1a\n"
    z = http.get("/camp/exports/download", params={"strict": "true"})
    assert z.status_code == 200 and "baulk-export/manifest.json" in zipfile.ZipFile(io.BytesIO(z.content)).namelist()


def test_safety_page_lists_what_the_tablets_answered(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    bone = safety_day(server, demo, http, tmp)
    _sign_in(http, server.add_device(label="AN-1", role="analyst")[1])  # read-only: an analyst sees it too

    def rows(**params: str) -> list[str]:
        page = http.get("/camp/safety", params=params)
        assert page.status_code == 200
        return re.findall(r'<td class="what">([^<]*?)(?: at <span|</td>)', page.text)

    page = http.get("/camp/safety").text
    assert "it never judges a trench safe" in page
    # newest first: the human remains (linked to the find, with who was told), the shoring check, the laser
    assert rows() == ["possible human remains", "shoring check", "total station laser"]
    assert f'<a href="/camp/finds/{bone.id}">find {bone.number}</a>' in page
    assert "Told: site director RM at 10:40" in page and '<span class="num">1.35 m</span>' in page
    assert rows(kind="shoring") == ["shoring check"]
    assert rows(days="7") == ["possible human remains", "shoring check"]
    assert rows(trench="TR1", kind="laser") == ["total station laser"]
    assert rows(trench="TR2") == [] and "No safety check matches." in http.get("/camp/safety", params={"trench": "TR2"}).text
    assert len(rows(kind="no-such-kind")) == 3  # an unknown kind in the address shows every kind


def test_today_shows_possible_human_remains_first(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    quiet = http.get("/camp/").text
    assert 'role="alert"' not in quiet
    assert '<span class="num">0</span> conflicts wait;\n<span class="num">0</span> checks are errors' in quiet
    assert "shoring check: <span class=\"num\">0</span>" in quiet
    bone = safety_day(server, demo, http, tmp)
    page = http.get("/camp/").text
    alert = page.index('role="alert"')
    assert alert < page.index("<h2>Devices</h2>")
    assert f"find {bone.number}</a>" in page[alert:] and "Told: site director RM at 10:40" in page[alert:]
    assert "stays stopped and the spot secured" in page
    # the last 24 hours: the laser check of ten days ago is not counted
    assert re.search(r"shoring check: <span class=\"num\">1</span>.*possible human remains: <span "
                     r"class=\"num\">1</span>.*total station laser: <span class=\"num\">0</span>", page, re.S)



def test_the_bare_address_opens_the_camp_pages(camp) -> None:  # type: ignore[no-untyped-def]
    _server, _demo, http, _tmp = camp
    r = http.get("/")
    assert r.status_code == 303 and r.headers["location"] == "/camp/"
    assert http.get("/camp/").headers["location"] == "/camp/sign-in"  # signed out: on to the sign-in form


def test_finds_are_paged_newest_first_and_a_find_reads_as_a_record(camp) -> None:  # type: ignore[no-untyped-def]
    import datetime as dt

    from schema.records import Site

    server, demo, http, tmp = camp
    server.put(server.list(Site)[0].model_copy(update={"timezone": "Africa/Nairobi"}))  # EAT: UTC+3 all year
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    start = dt.datetime(2026, 7, 3, 5, 0, 7, 250000, tzinfo=dt.timezone.utc)
    made = [t1.save_find(find=find_data(demo, number=t1.next_find_number(), material="other_stone", weight_g=12.5,
                                        found_at=start + dt.timedelta(minutes=i)))
            for i in range(53)]
    c1.sync()
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get("/camp/finds").text
    numbers = [int(n) for n in re.findall(r'<a href="/camp/finds/[^"]+">(\d+)</a>', page)]
    assert numbers == [f.number for f in reversed(made)][:50]  # newest first, fifty a page
    assert "Finds <span class=\"num\">1-50</span> of <span class=\"num\">53</span>, newest first." in page
    assert "other stone" in page and "2026-07-03 08:52 EAT" in page and 'rel="next"' in page
    second = http.get("/camp/finds", params={"page": "2"}).text
    assert [int(n) for n in re.findall(r'<a href="/camp/finds/[^"]+">(\d+)</a>', second)] == [3, 2, 1]
    assert 'rel="prev"' in second and 'rel="next"' not in second
    record = http.get(f"/camp/finds/{made[0].id}").text
    assert "Trench <strong>TR1</strong>, unit <strong>101</strong>" in record
    assert "<dt>Weight (g)</dt><dd>12.5</dd>" in record and "<dt>Found at</dt><dd>2026-07-03 08:00 EAT</dd>" in record
    assert "<dt>Unit</dt><dd>101</dd>" in record and "<dt>Numbered on</dt><dd>TAB-1</dd>" in record
    assert str(made[0].unit_id) not in record.split("<h2>History</h2>")[0].replace(f"/camp/units/{made[0].unit_id}", "")
    assert record.index("<h2>Where</h2>") < record.index("<h2>History</h2>") < record.index("<h2>Corrections</h2>")
    assert not re.search(r"\d\d:\d\d:\d\d", record)  # no seconds, no microseconds


def test_the_matrix_outlines_exactly_the_units_checks_name(camp) -> None:  # type: ignore[no-untyped-def]
    from sync_server.validation import accept_issue, list_issues, run_validation

    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number(), z=99.30))  # below unit 101: a find check
    t1.save_find(find=find_data(demo, number=t1.next_find_number(), unit_id=demo.units["102"].id))  # above 102
    c1.sync()
    run_validation(server)
    on_102 = [i for i in list_issues(server) if i["unit"] == "102"]
    assert on_102 and all(i["record"] == "find" for i in list_issues(server))  # only find checks name units here
    for i in on_102:
        accept_issue(server, key=i["key"], by="MGR", reason="ash lens seen in the section")
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    page = http.get("/camp/matrix").text
    red = re.findall(r'<rect [^>]*stroke="#c00000" stroke-width="4"/>\s*<text [^>]*>([^<]+)</text>', page)
    assert red == ["101 (1)"]  # named by a find check and open; 102's check is accepted, so not outlined
    assert '<a href="/camp/checks?unit=101">' in page
    checks = http.get("/camp/checks").text
    assert f'<span class="num">1</span> open check; <span class="num">{len(on_102)}</span> accepted' in checks
    assert checks.index("POS_BELOW_UNIT") < checks.index("Accepted by MGR")  # what still needs a look comes first


def test_a_number_clash_is_one_conflict_on_today_and_each_of_its_finds_can_be_renumbered(camp) -> None:  # type: ignore[no-untyped-def]
    """Issue 16: Today counts a clash as GET /v1/conflicts does, and the Conflicts page offers a renumber form
    for every find of the clash, not only the first."""
    import uuid

    server, demo, http, tmp = camp
    (t1, c1), (t2, c2), a, b = number_clash(server, demo, http, tmp)
    csrf = _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    assert '<span class="num">1</span> conflict waits;' in http.get("/camp/").text
    page = http.get("/camp/conflicts").text
    forms = re.findall(r'<form method="post" action="/camp/conflicts/resolve" class="renumber">.*?</form>', page, re.S)
    offered = sorted(re.search(r'name="record_id" value="([^"]+)"', f).group(1) for f in forms)  # type: ignore[union-attr]
    assert offered == sorted([str(a.id), str(b.id)])
    assert all('name="field" value="number"' in f and "Renumber this find" in f for f in forms)
    # each find said in site terms, told apart by material and unit
    assert sorted(re.search(r'find 1</a> \(([^)]*)\) from (TAB-\d)', f).groups() for f in forms) == [  # type: ignore[union-attr]
        ("chert, unit 101", "TAB-2"), ("obsidian, unit 101", "TAB-1")]
    later = max(str(a.id), str(b.id))  # the find the page used to leave without a form
    form = {"content-type": "application/x-www-form-urlencoded"}
    r = http.post("/camp/conflicts/resolve", headers=form,
                  content=f"csrf={csrf}&record=find&record_id={later}&field=number&typed=150")
    assert r.status_code == 303 and "settled" in r.headers["location"], r.headers["location"]
    assert list_conflicts(server) == []
    assert server.get(Find, uuid.UUID(later)).number == 150
    assert server.get(Find, uuid.UUID(min(str(a.id), str(b.id)))).number == 1  # the other keeps its number
    assert '<span class="num">0</span> conflicts wait;' in http.get("/camp/").text
