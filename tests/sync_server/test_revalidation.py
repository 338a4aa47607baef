"""Checks follow every change (issue 16): after a push, a manager's resolution (route and camp page), a bundle
import, a season import and a camp correction (command and page), ``GET /v1/issues`` on a real server shows the
new state within a bounded wait, without an unrelated push to set validation off."""

from __future__ import annotations

import re
import time
from pathlib import Path
from typing import Any, Callable, Iterator

import httpx
import pytest
from click.testing import CliRunner

from mobile.bundles import export_bundle
from schema.records import Find
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.loopback import serve_in_thread
from sync_server.seasons import import_archive, write_archive
from sync_server.store import ServerStore
from tests.helpers import find_data, number_clash, seeded_server, synced_tablet

WAIT_S = 30.0  # the bound: validation of this small site takes well under a second
FORM = {"content-type": "application/x-www-form-urlencoded"}


def _eventually(what: str, probe: Callable[[], Any], wanted: Callable[[Any], bool]) -> Any:
    """Ask ``probe`` again until ``wanted`` holds; fail with the last answer once ``WAIT_S`` has passed."""
    deadline = time.monotonic() + WAIT_S
    while True:
        seen = probe()
        if wanted(seen):
            return seen
        if time.monotonic() > deadline:
            pytest.fail(f"{what}: still {seen!r} after {WAIT_S:.0f} s")
        time.sleep(0.05)


class Live:
    """A seeded camp store served by uvicorn on loopback, a manager's token, and the HTTP client."""

    def __init__(self, server: Any, demo: Any, http: httpx.Client, url: str, tmp: Path):
        self.server, self.demo, self.http, self.url, self.tmp = server, demo, http, url, tmp
        self.manager = {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}

    def issues(self, code: str) -> list[str]:
        """Labels of the open issues of ``code``, as GET /v1/issues lists them now."""
        r = self.http.get("/v1/issues", params={"code": code}, headers=self.manager)
        assert r.status_code == 200, r.text
        return sorted(i["label"] for i in r.json()["data"])

    def wait_for(self, code: str, labels: list[str]) -> None:
        _eventually(f"open {code} issues", lambda: self.issues(code), lambda seen: seen == sorted(labels))


@pytest.fixture
def live(tmp_path: Path) -> Iterator[Live]:
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    server, demo = seeded_server(url)
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=30) as http:
        yield Live(server, demo, http, url, tmp_path)
    server.close()


def _clash(live: Live) -> tuple[Any, Any, Any]:
    """Two tablets number a find 1 (TAB-2 was given TAB-1's block by hand); both sync: NUMBER_DUPLICATE."""
    _first, (t2, c2), _a, b = number_clash(live.server, live.demo, live.http, live.tmp)
    live.wait_for("NUMBER_DUPLICATE", ["find 1"])  # after the pushes
    return t2, c2, b


def test_a_resolution_through_the_api_closes_the_number_clash(live: Live) -> None:
    _t2, _c2, b = _clash(live)
    r = live.http.post("/v1/conflicts/resolve", headers=live.manager,
                       json={"record": "find", "record_id": str(b.id), "field": "number", "value": 150})
    assert r.status_code == 200, r.text
    live.wait_for("NUMBER_DUPLICATE", [])


def test_a_resolution_on_the_camp_page_closes_the_number_clash(live: Live) -> None:
    _t2, _c2, b = _clash(live)
    token = live.manager["Authorization"].removeprefix("Bearer ")
    assert live.http.post("/camp/sign-in", content=f"token={token}", headers=FORM).status_code in (200, 303)
    csrf = re.search(r'name="csrf" value="([^"]+)"', live.http.get("/camp/").text).group(1)  # type: ignore[union-attr]
    r = live.http.post("/camp/conflicts/resolve", headers=FORM, follow_redirects=False,
                       content=f"csrf={csrf}&record=find&record_id={b.id}&field=number&typed=150")
    assert r.status_code == 303 and "settled" in r.headers["location"], r.headers.get("location")
    live.wait_for("NUMBER_DUPLICATE", [])


def test_a_bundle_import_beside_the_running_server_shows_its_checks(live: Live) -> None:
    tablet, _client = synced_tablet(live.server, live.http, live.tmp, "TAB-USB")  # then only by USB
    low = tablet.save_find(find=find_data(live.demo, number=tablet.next_find_number(), z=99.30))  # below unit 101
    made = export_bundle(tablet, live.tmp)
    result = CliRunner().invoke(cli, ["bundle", "import", made["path"], "--db", live.url])
    assert result.exit_code == 0, result.output
    live.wait_for("POS_BELOW_UNIT", [f"find {low.number}"])


def test_camp_corrections_by_command_and_page_close_their_checks(live: Live) -> None:
    t1, c1 = synced_tablet(live.server, live.http, live.tmp, "TAB-1")
    one, two = (t1.save_find(find=find_data(live.demo, number=t1.next_find_number(), z=99.30)) for _ in range(2))
    c1.sync()
    live.wait_for("POS_BELOW_UNIT", [f"find {one.number}", f"find {two.number}"])  # after the push
    # the command, in its own process's store beside the server
    result = CliRunner().invoke(cli, ["correct", "find", str(one.number), "unit=103", "--reason", "wrong tag",
                                      "--by", "DM", "--db", live.url])
    assert result.exit_code == 0, result.output
    live.wait_for("POS_BELOW_UNIT", [f"find {two.number}"])
    # the camp page
    token = live.manager["Authorization"].removeprefix("Bearer ")
    live.http.post("/camp/sign-in", content=f"token={token}", headers=FORM)
    csrf = re.search(r'name="csrf" value="([^"]+)"', live.http.get("/camp/").text).group(1)  # type: ignore[union-attr]
    r = live.http.post(f"/camp/finds/{two.id}/correct", follow_redirects=False,
                       data={"csrf": csrf, "field": "unit", "value": "103", "reason": "wrong tag"})
    assert r.status_code == 303, r.text
    live.wait_for("POS_BELOW_UNIT", [])
    assert live.server.get(Find, two.id).unit_id == live.demo.units["103"].id


def test_a_season_import_beside_the_running_server_shows_its_checks(tmp_path: Path) -> None:
    old, demo = seeded_server(f"sqlite:///{tmp_path / 'season-2025.sqlite'}")
    write_archive(old, tmp_path / "setup.zip")
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    with ServerStore.open(url) as server:
        import_archive(server, tmp_path / "setup.zip")  # this season's store starts from last season's site
        low = old.add(Find(**find_data(demo, number=7, z=99.30)))
        write_archive(old, tmp_path / "2025.zip")
        old.close()
        with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=30) as http:
            live = Live(server, demo, http, url, tmp_path)
            assert live.issues("POS_BELOW_UNIT") == []
            result = CliRunner().invoke(cli, ["season", "import", str(tmp_path / "2025.zip"), "--db", url])
            assert result.exit_code == 0, result.output
            live.wait_for("POS_BELOW_UNIT", [f"find {low.number}"])


def test_a_run_over_older_data_does_not_overwrite_a_newer_one(tmp_path: Path) -> None:
    """Two processes validating one store: the run that read the older data and writes last keeps the newer
    run's issues (the change-log position each read at is kept beside them)."""
    import sqlalchemy as sa

    from schema.sync.tables import field_version
    from sync_server.validation import list_issues, run_validation, store_run

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    low = server.add(Find(**find_data(demo, number=1, z=99.30)))
    with server.read() as conn:  # one run reads the store here...
        read_at = int(conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar_one())
    stale = server.site_data()
    server.put(low.model_copy(update={"unit_id": demo.units["103"].id}))  # ...a correction lands...
    run_validation(server)  # ...and another process's run stores the newer state first
    assert list_issues(server) == []
    report, run = store_run(server, stale, read_at=read_at)  # the first run writes last
    assert [i.code for i in report.issues] == ["POS_BELOW_UNIT"] and run.new == 1  # it saw the old issue...
    assert list_issues(server) == []  # ...and kept the newer run's state
    run_validation(server)  # a run over the current data writes as ever
    assert list_issues(server) == []
    server.close()
