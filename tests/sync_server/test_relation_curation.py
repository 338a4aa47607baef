"""A relation voided and restored at camp (issue 18, follow-up of item 12): ``baulk correct void-relation`` and
``restore-relation``, the Relations section of the unit page over HTTP, checks run again after each, and a tablet
that syncs drops the voided relation from its matrix.

The situation is the one the cycle check describes: a tablet typed 103 above 101 although 101 lies above 102 above
103 (the invented demo site), so units 101, 102 (with its same-as units 204 and 302) and 103 go round in a circle."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import httpx
import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient

from schema.records import Relation
from schema.strata.matrix import build_matrix
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.loopback import serve_in_thread
from sync_server.validation import list_issues, run_validation
from tests.helpers import seeded_server, synced_tablet

FORM = {"content-type": "application/x-www-form-urlencoded"}


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    wrong = server.add(Relation(site_id=demo.site.id, upper_unit_id=demo.units["103"].id,
                                lower_unit_id=demo.units["101"].id, kind="above"))
    run_validation(server)
    yield server, demo, wrong, url
    server.close()


def _open(server: Any, code: str) -> int:
    return len(list_issues(server, code=code, include_accepted=False))


def run(url: str, *args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, [*args, "--db", url])
    return result.exit_code, result.output


def test_void_and_restore_a_relation_by_command(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, wrong, url = camp
    assert _open(server, "MATRIX_CYCLE") == 1
    code, out = run(url, "correct", "void-relation", "103", "above", "101", "--reason",
                    "misread the section: 103 lies under 101", "--by", "DM")
    assert (code, out) == (0, "relation 103 above 101 voided: it no longer counts in the matrix\n"
                              "reason: misread the section: 103 lies under 101 (camp, DM)\n"
                              "no matrix check is open\n")
    kept = server.get(Relation, wrong.id)
    assert (kept.voided, kept.void_reason) == (True, "misread the section: 103 lies under 101 (camp, DM)")
    assert _open(server, "MATRIX_CYCLE") == 0  # the checks ran again
    code, out = run(url, "correct", "restore-relation", "103", "above", "101", "--reason", "re-read: it was right",
                    "--by", "DM")
    assert (code, out) == (0, "relation 103 above 101 restored: it counts in the matrix again\n"
                              "reason: restored (camp, DM): re-read: it was right\n"
                              "checks now open: 1 MATRIX_CYCLE (baulk validate lists them)\n")
    assert not server.get(Relation, wrong.id).voided
    assert _open(server, "MATRIX_CYCLE") == 1


@pytest.mark.parametrize(("args", "message"), [
    (("103", "above", "101", "--reason", "no"),
     "Error: to void a relation give a reason: say why, e.g. 'misread the section: 103 lies under 101'"),
    (("103", "bellow", "101", "--reason", "wrong way"),
     "Error: relation refused, nothing was saved. kind: 'bellow' is not a kind of relation. Fix: use one of: above, "
     "cuts, fills, same as, contemporary"),
    (("101", "above", "103", "--reason", "wrong way"),
     "Error: no relation 101 above 103 is recorded; between these two units site VLM holds: 103 above 101"),
    (("1O3", "above", "101", "--reason", "wrong way"),
     "Error: site VLM has no unit '1O3' (did you mean 103?); name the relation by its two unit codes "
     "and its kind, e.g. 103 above 101"),
])
def test_a_refused_void_names_the_fix_and_writes_nothing(camp, args: tuple[str, ...], message: str) -> None:  # type: ignore[no-untyped-def]
    server, _demo, _wrong, url = camp
    before = server.counts()
    code, out = run(url, "correct", "void-relation", *args, "--by", "DM")
    assert (code, out.strip()) == (1, message)
    assert server.counts() == before


def test_restoring_a_relation_in_force_changes_nothing(camp) -> None:  # type: ignore[no-untyped-def]
    _server, _demo, _wrong, url = camp
    code, out = run(url, "correct", "restore-relation", "103", "above", "101", "--reason", "why not", "--by", "DM")
    assert (code, out.strip()) == (1, "Error: relation 103 above 101 is already in force; nothing was restored")


def _sign_in(http: TestClient, server: Any, role: str) -> str:
    token = server.add_device(label="MGR" if role == "manager" else "AN-1", role=role)[1]
    assert http.post("/camp/sign-in", content=f"token={token}", headers=FORM).status_code == 303
    return re.search(r'name="csrf" value="([^"]+)"', http.get("/camp/").text).group(1)  # type: ignore[union-attr]


def test_the_unit_page_voids_and_restores_a_relation(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, wrong, _url = camp
    unit = demo.units["103"]
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        csrf = _sign_in(http, server, "manager")
        checks = http.get("/camp/checks?code=MATRIX_CYCLE").text
        assert "at camp: the unit&#39;s page (its name on Checks or Matrix), Relations, Void" in checks
        linked = re.search(r'MATRIX_CYCLE: <a href="/camp/units/([0-9a-f-]+)">units 101, 102=204=302, 103</a>', checks)
        assert linked is not None  # the check's name opens a unit of the circle
        page = http.get(f"/camp/units/{unit.id}").text
        assert f'action="/camp/relations/{wrong.id}/void"' in page
        assert 'aria-label="void 103 above 101"' in page and 'aria-label="void 102 above 103"' in page
        before = server.counts()
        r = http.post(f"/camp/relations/{wrong.id}/void", data={"csrf": csrf, "unit": str(unit.id), "reason": " ",
                                                                 "by": "DM"})
        assert r.status_code == 400
        assert "to void a relation give a reason: say why, e.g. &#39;misread the section: 103 lies under 101&#39;" in r.text
        assert f'<div class="card error" id="relation-{wrong.id}">' in r.text  # shown at the relation
        assert server.counts() == before and not server.get(Relation, wrong.id).voided
        r = http.post(f"/camp/relations/{wrong.id}/void", data={"csrf": csrf, "unit": str(unit.id), "by": "DM",
                                                                 "reason": "misread the section: 103 lies under 101"})
        assert r.status_code == 303 and r.headers["location"].startswith(f"/camp/units/{unit.id}?message=")
        page = http.get(r.headers["location"]).text
        assert ("relation 103 above 101 voided: it no longer counts in the matrix. Why: misread the section: 103 lies "
                "under 101 (camp, DM)") in page
        assert re.search(r"<del><a [^>]+>103</a> above\s+<a [^>]+>101</a></del> <strong>voided</strong>", page)
        assert f'action="/camp/relations/{wrong.id}/restore"' in page
        assert server.get(Relation, wrong.id).voided
        assert _open(server, "MATRIX_CYCLE") == 0  # validation ran again after the answer
        r = http.post(f"/camp/relations/{wrong.id}/restore", data={"csrf": csrf, "unit": str(unit.id), "by": "DM",
                                                                    "reason": "re-read the drawing: it was right"})
        assert r.status_code == 303
        assert not server.get(Relation, wrong.id).voided
        assert _open(server, "MATRIX_CYCLE") == 1


def test_an_analyst_sees_relations_but_cannot_void_them(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, wrong, _url = camp
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        csrf = _sign_in(http, server, "analyst")
        page = http.get(f"/camp/units/{demo.units['103'].id}").text
        assert "103</a> above" in page and "/void" not in page
        r = http.post(f"/camp/relations/{wrong.id}/void", data={"csrf": csrf, "reason": "not mine to void",
                                                                 "by": "AN"})
        assert r.status_code == 403 and not server.get(Relation, wrong.id).voided


def test_a_relation_voided_at_camp_leaves_the_tablets_matrix(camp, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    from mobile.checks import check_matrix
    from mobile.controllers.day import DayController
    from mobile.controllers.units import UnitsController
    from sync_server.curation import void_relation

    server, demo, wrong, _url = camp
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        assert any(i.code == "MATRIX_CYCLE" for i in check_matrix(tablet))
        void_relation(server, upper="103", kind="above", lower="101", reason="misread the section", by="DM")
        client.sync()
    held = tablet.get(Relation, wrong.id)
    assert (held.voided, held.void_reason) == (True, "misread the section (camp, DM)")
    assert not any(i.code == "MATRIX_CYCLE" for i in check_matrix(tablet))
    data = tablet.site_data()
    matrix = build_matrix(data.units, data.relations)
    group = matrix.group_of
    assert (group[demo.units["103"].id], group[demo.units["101"].id]) not in matrix.edges
    assert matrix.reduced is not None  # no circle left: the matrix reduces
    days = DayController(tablet)
    days.start(site_code=demo.site.code, season_label=demo.season.label, trench_code="TR1", recorder="AK")
    lines = UnitsController(tablet, days).relations("103")
    assert lines[-1].words() == "VOIDED 103 above 101 (misread the section (camp, DM))"
    tablet.close()
