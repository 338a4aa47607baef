"""Validation on the server store (SQLite and PostgreSQL): runs stored, acceptances kept, fixed issues closed."""

from __future__ import annotations

import csv
import datetime as dt
import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from schema.demo_site import DemoSite
from schema.records import Find
from sync_server.cli import cli
from sync_server.store import ServerStore
from sync_server.validation import accept_issue, list_issues, run_validation
from tests.helpers import find_data

T0 = dt.datetime(2026, 7, 10, 20, 0, tzinfo=dt.timezone.utc)


@pytest.fixture
def server(server_url: str, demo_site: DemoSite):  # type: ignore[no-untyped-def]
    store = ServerStore.open(server_url)
    with store.atomic():
        for record in demo_site.setup_records():
            store.add(record)
    yield store
    store.close()


def test_run_store_accept_and_close(server: ServerStore, demo_site: DemoSite) -> None:
    wrong = server.add(Find.model_validate(find_data(demo_site, number=1, z=99.30)))
    server.add(Find.model_validate(find_data(demo_site, number=2)))
    report, run = run_validation(server, now=T0)
    assert [i.code for i in report.errors] == ["POS_BELOW_UNIT"] and run.new == 1
    (row,) = list_issues(server)
    assert (row["label"], row["trench"], row["unit"], row["open"]) == ("find 1", "TR1", "101", True)
    accepted = accept_issue(server, key=row["key"], by="MGR", reason="krotovina seen in the section")
    assert accepted["accepted_by"] == "MGR"
    # a second run keeps the acceptance
    _report, run = run_validation(server, now=T0 + dt.timedelta(days=1))
    assert (run.new, run.still_open, run.accepted_open) == (0, 1, 1)
    assert list_issues(server)[0]["accepted_reason"] == "krotovina seen in the section"
    # the data manager corrects the unit: the issue closes
    server.put(wrong.model_copy(update={"unit_id": demo_site.units["103"].id}))
    _report, run = run_validation(server, now=T0 + dt.timedelta(days=2))
    assert run.resolved == 1 and list_issues(server) == []
    assert list_issues(server, include_closed=True)[0]["open"] is False


def test_filters(server: ServerStore, demo_site: DemoSite) -> None:
    server.add(Find.model_validate(find_data(demo_site, number=1, z=99.30)))
    spit = demo_site.spits["101"][0].id
    server.add(Find.model_validate(find_data(demo_site, number=2, recovery="sieved", spit_id=spit)))
    run_validation(server, now=T0)
    assert [r["code"] for r in list_issues(server)] == ["POS_BELOW_UNIT", "SIEVE_HAS_POINT"]
    assert [r["code"] for r in list_issues(server, severity="warning")] == ["SIEVE_HAS_POINT"]
    assert [r["code"] for r in list_issues(server, code="POS_BELOW_UNIT", trench="TR1", unit="101")] == ["POS_BELOW_UNIT"]
    assert list_issues(server, trench="TR2") == []


def test_accepting_needs_a_reason_and_a_real_key(server: ServerStore) -> None:
    from schema.errors import RecordNotFound

    with pytest.raises(ValueError, match="give a reason"):
        accept_issue(server, key="x", by="MGR", reason=" ")
    with pytest.raises(RecordNotFound, match="no validation issue has key 'x'"):
        accept_issue(server, key="x", by="MGR", reason="fine")


def test_baulk_validate_writes_json_and_csv_and_exits_1_on_errors(tmp_path: Path, demo_site: DemoSite) -> None:
    url = f"sqlite:///{tmp_path / 'camp.sqlite'}"
    with ServerStore.open(url) as store:
        for record in demo_site.setup_records():
            store.add(record)
        store.add(Find.model_validate(find_data(demo_site, number=1432, z=99.30)))
    out = tmp_path / "report"
    result = CliRunner().invoke(cli, ["validate", "--db", url, "--out", str(out)])
    assert result.exit_code == 1
    assert "1 errors (1 not accepted), 0 warnings, 0 notes" in result.output
    assert "  - find 1432: Z 99.300 is 0.350 m below the base of unit 101 at this point; check the unit or the target height" in result.output
    with (out / "issues.csv").open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["code"] for r in rows] == ["POS_BELOW_UNIT"] and rows[0]["unit"] == "101"
    assert json.loads((out / "issues.json").read_text())[0]["label"] == "find 1432"


def test_baulk_validate_a_tablet_file_leaves_it_unchanged(tmp_path: Path, demo_out: Path) -> None:
    tab = demo_out / "tablets" / "TAB-2.sqlite"
    before = tab.read_bytes()
    result = CliRunner().invoke(cli, ["validate", "--tablet", str(tab), "--out", str(tmp_path / "r")])
    assert result.exit_code == 1  # the demo plants a find in a cut, among others
    assert "UNIT_IS_CUT" in result.output
    assert tab.read_bytes() == before


def test_revalidation_is_coalesced_while_a_run_is_going(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Ten merges landing during one validation run lead to one more run, not ten."""
    import threading

    from sync_server import validation
    from sync_server.validation import Revalidator

    started, release = threading.Event(), threading.Event()
    calls: list[int] = []

    def slow_run(_store) -> None:  # type: ignore[no-untyped-def]
        calls.append(1)
        if len(calls) == 1:
            started.set()
            release.wait(10)

    original = validation.validate_after_merge
    validation.validate_after_merge = slow_run  # type: ignore[assignment]
    try:
        r = Revalidator(store=None)  # type: ignore[arg-type]
        first = threading.Thread(target=r)
        first.start()
        assert started.wait(10)
        for _ in range(10):
            r()  # each returns at once: a run is going
        release.set()
        first.join(10)
    finally:
        validation.validate_after_merge = original  # type: ignore[assignment]
    assert len(calls) == 2 and r.runs == 2
