"""Find numbers and number floors have bounds: at most 2^53 - 1 (the largest whole number JSON carries exactly),
and a renumbering or an imported floor far above the issued blocks only when the manager confirms it.

Unbounded, a number of 2^62 made every later block start past 2^62, 2^63 + 1 answered 500 and stuck the tablet's
queue, and a season archive's ``number_floor`` of 2^63 imported with exit 0.
"""

from __future__ import annotations

import json
import re
import zipfile
from pathlib import Path
from typing import Any
from urllib.parse import unquote

import pytest
import sqlalchemy as sa
from click.testing import CliRunner
from fastapi.testclient import TestClient

from mobile import outbox
from schema.records import Find, NumberBlock
from schema.sync import batch_hash
from schema.sync.tables import field_version, pending_row
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.seasons import write_archive
from sync_server.store import ServerStore
from sync_server.sync import list_conflicts
from tests.helpers import find_data, number_clash, seeded_server, synced_tablet

MAX = 2**53 - 1


def test_the_find_model_and_its_json_schema_bound_the_number() -> None:
    schema = json.loads((Path(__file__).parents[2] / "schema" / "json" / "find.json").read_text())
    assert (schema["properties"]["number"]["minimum"], schema["properties"]["number"]["maximum"]) == (1, MAX)


def test_a_pushed_number_past_the_bound_is_refused_with_a_reason_and_the_queue_moves_on(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    finds = [t1.save_find(find=find_data(demo, number=t1.next_find_number())) for _ in range(3)]
    outbox.cut_batches(t1)
    (number,) = outbox.unacked_batches(t1)
    huge = {finds[0].id: 2**63 + 1, finds[1].id: 2**62}  # the third keeps its own number
    sent = [v.model_copy(update={"value": huge[v.record_id]}) if v.field == "number" and v.record_id in huge else v
            for v in outbox.batch_versions(t1, number)]
    r = http.post("/v1/sync/push", headers=c1.headers, json={
        "batch": number, "hash": batch_hash(sent), "versions": [v.model_dump(mode="json") for v in sent]})
    assert r.status_code == 200, r.text
    ack = r.json()
    numbers = {v.record_id: v for v in sent if v.field == "number"}
    assert ack["refused"] == [
        {"version": numbers[f.id].id, "record": "find", "field": "number", "reason": (
            f"TAB-1 sent find number {huge[f.id]} for find {f.id}, past the largest find number Baulk keeps "
            "(9007199254740991, the largest whole number JSON carries exactly), so this value was not applied; "
            "give the find a number from the tablet's own number block and sync again.")}
        for f in finds[:2]]
    assert ack["applied"] == len(sent) - 2 and ack["received"] == len(sent)
    with server.read() as conn:
        held = set(conn.execute(sa.select(field_version.c.id).where(field_version.c.record == "find",
                                                                 field_version.c.field == "number")).scalars())
        waiting = {r.record_id: r.reason for r in conn.execute(sa.select(pending_row))}
    assert held == {numbers[finds[2].id].id}
    assert waiting == {finds[0].id: "waiting for fields: number", finds[1].id: "waiting for fields: number"}
    assert server.get(Find, finds[2].id).number == finds[2].number
    # the batch was acknowledged (the tablet's queue moves on), and later blocks start where they should
    device, _ = server.add_device(label="TAB-9", role="recorder")
    highest = max(b.last for b in server.list(NumberBlock))
    assert server.issue_number_block(device_id=device.id).first == highest + 1


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A season archive of a store holding the site and finds 1-3 (its number floor is 3)."""
    tmp = tmp_path_factory.mktemp("archive")
    old, demo = seeded_server(f"sqlite:///{tmp / 'old.sqlite'}")
    for n in (1, 2, 3):
        old.add(Find(**find_data(demo, number=n)))
    write_archive(old, tmp / "season.zip")
    old.close()
    return tmp / "season.zip"


def _with_floor(src: Path, dst: Path, floor: Any) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", compression=zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            if item.filename == "manifest.json":
                data = json.dumps({**json.loads(data), "number_floor": floor}).encode()
            zout.writestr(item.filename, data)
    return dst


def _new_store(tmp: Path) -> tuple[str, int]:
    url = f"sqlite:///{tmp / 'new.sqlite'}"
    ServerStore.open(url).close()
    return url, _version_count(url)


def _version_count(url: str) -> int:
    with ServerStore.open(url, create=False) as store, store.read() as conn:
        return int(conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one())


@pytest.mark.parametrize("floor", ["abc", -1, 2**63, MAX + 1, True, 1.5, None])
def test_a_season_floor_must_be_a_whole_number_within_the_bound(archive: Path, tmp_path: Path, floor: Any) -> None:
    bad = _with_floor(archive, tmp_path / "bad.zip", floor)
    url, before = _new_store(tmp_path)
    r = CliRunner().invoke(cli, ["season", "import", str(bad), "--db", url])
    assert r.exit_code == 1
    assert r.output == (f"Error: bad.zip: the manifest's number_floor {json.dumps(floor)} is not a whole number from 0 "
                        "to 9007199254740991; write the archive again from the old store (nothing was imported)\n")
    assert _version_count(url) == before


def test_a_floor_far_above_the_issued_numbers_is_imported_only_when_confirmed(archive: Path, tmp_path: Path) -> None:
    runner = CliRunner()
    url, before = _new_store(tmp_path)
    # the archive's finds run to 3 and the site's blocks hold 500: up to 3 + 10 x 500 needs no confirming
    r = runner.invoke(cli, ["season", "import", str(_with_floor(archive, tmp_path / "near.zip", 5003)), "--db", url])
    assert r.exit_code == 0, r.output
    assert r.output.endswith("new number blocks start above 5003\n")

    (tmp_path / "again").mkdir()
    url, before = _new_store(tmp_path / "again")
    far = _with_floor(archive, tmp_path / "far.zip", 5004)
    r = runner.invoke(cli, ["season", "import", str(far), "--db", url])
    assert r.exit_code == 1
    assert r.output == (
        "Error: far.zip sets the number floor to 5004: that is more than 10 blocks of 500 numbers above the highest "
        "number issued or used here (3; no block is issued yet), and every block issued after it would start above "
        "5004. Write the archive again from the old store if that floor is wrong, or confirm the far number on "
        "purpose (run the import again with --confirm-far-number).\n")
    assert _version_count(url) == before  # nothing of the archive was applied
    r = runner.invoke(cli, ["season", "import", str(far), "--confirm-far-number", "--db", url])
    assert r.exit_code == 0, r.output
    assert r.output.endswith("new number blocks start above 5004\n")
    with ServerStore.open(url, create=False) as store:
        device, _ = store.add_device(label="TAB-1", role="recorder")
        assert store.issue_number_block(device_id=device.id).first == 5005


def _duplicate_number(server: Any, demo: Any, http: Any, tmp: Path) -> tuple[Any, Any]:
    """Two tablets' finds sharing number 1 (TAB-2 was given an overlapping block by hand): a conflict on each."""
    _first, _second, a, b = number_clash(server, demo, http, tmp)
    assert {c["kind"] for c in list_conflicts(server)} == {"duplicate_number"}
    return a, b


def _far_message(find_id: Any, number: int, confirm: str) -> str:
    return (f"find {find_id} cannot be renumbered to {number}: that is more than 10 blocks of 500 numbers above the "
            "highest number issued or used here (200; the highest block issued is 101-200), and every block issued "
            f"after it would start above {number}. Give it a number inside the issued blocks (a free one from a "
            f"tablet's block), or confirm the far number on purpose ({confirm}).")


def test_a_far_renumbering_through_the_api_needs_confirming(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    _a, b = _duplicate_number(server, demo, http, tmp)
    manager = {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}

    def resolve(value: Any, **extra: Any) -> Any:
        return http.post("/v1/conflicts/resolve", headers=manager,
                         json={"record": "find", "record_id": str(b.id), "field": "number", "value": value, **extra})

    r = resolve(100_000_000_000)
    assert r.status_code == 409
    assert r.json() == {"code": "NumberTooFar",
                        "message": _far_message(b.id, 100_000_000_000, '"confirm_far": true in the request')}
    for value, shown in ((MAX + 1, str(MAX + 1)), ("abc", '"abc"'), (0, "0"), (True, "true"), (12.5, "12.5")):
        r = resolve(value)
        assert r.status_code == 422
        assert r.json() == {"code": "RecordInvalid", "message": (
            f"find refused, nothing was saved. number: the new number {shown} for find {b.id} is not a whole number "
            f"from 1 to {MAX}. Fix: type the find's new number as digits only, e.g. 1234")}
    assert resolve(5201).json()["message"] == _far_message(b.id, 5201, '"confirm_far": true in the request')
    assert len(list_conflicts(server)) == 1  # nothing was written (one clash: one conflict)
    assert resolve(5200).status_code == 200  # 200 + 10 x 500: near enough without confirming
    assert server.get(Find, b.id).number == 5200 and list_conflicts(server) == []


def test_a_far_renumbering_is_accepted_when_the_manager_confirms_it(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    _a, b = _duplicate_number(server, demo, http, tmp)
    manager = {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}
    r = http.post("/v1/conflicts/resolve", headers=manager, json={
        "record": "find", "record_id": str(b.id), "field": "number", "value": 100_000_000_000, "confirm_far": True})
    assert r.status_code == 200 and r.json()["still_open"] is None, r.text
    assert server.get(Find, b.id).number == 100_000_000_000


def test_the_conflicts_page_asks_for_the_checkbox_before_a_far_renumbering(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, api, tmp = camp
    _a, b = _duplicate_number(server, demo, api, tmp)
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        token = server.add_device(label="MGR", role="manager")[1]
        form = {"content-type": "application/x-www-form-urlencoded"}
        assert http.post("/camp/sign-in", content=f"token={token}", headers=form).status_code == 303
        page = http.get("/camp/conflicts").text
        assert page.count('<section class="card" id="c') == 1  # one clash, one conflict (issue 16)...
        assert page.count('name="confirm_far" value="yes"') == 2  # ...with a renumber form for each of its finds
        csrf = re.search(r'name="csrf" value="([^"]+)"', page).group(1)  # type: ignore[union-attr]
        body = f"csrf={csrf}&record=find&record_id={b.id}&field=number&typed=100000000000"
        r = http.post("/camp/conflicts/resolve", content=body, headers=form)
        assert r.status_code == 303
        assert unquote(r.headers["location"]) == "/camp/conflicts?message=not settled: " + _far_message(
            b.id, 100_000_000_000, 'tick "the new number is meant to be far above the issued blocks" and settle again')
        assert len(list_conflicts(server)) == 1
        r = http.post("/camp/conflicts/resolve", content=body + "&confirm_far=yes", headers=form)
        assert r.status_code == 303 and unquote(r.headers["location"]) == "/camp/conflicts?message=settled"
    assert server.get(Find, b.id).number == 100_000_000_000 and list_conflicts(server) == []
