"""Issue 16: the tablet's kept live checks follow what arrives from the camp. A camp correction that puts a find
in a cut (cuts hold no finds: UNIT_IS_CUT) opens that check on the tablet after a pull over HTTP; the correction
back, carried by a return bundle, closes it. Both as the recorder sees them: ``FindController.open_checks``."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import httpx

from mobile.bundles import export_bundle, read_return_bundle
from mobile.checks import check_find, keep_checks
from mobile.controllers import CampLink
from mobile.controllers.day import DayController
from mobile.controllers.finds import FindController
from mobile.sync import SyncClient
from schema.records import Find
from sync_server.app import create_app
from sync_server.bundles import import_bundle, write_for_tablet
from sync_server.curation import correct_record
from sync_server.loopback import serve_in_thread
from tests.helpers import enrolled_tablet, find_data, seeded_server


def _codes(tablet: Any, find_id: Any) -> list[str]:
    return [c["code"] for c in FindController(tablet, DayController(tablet)).open_checks(find_id)]


def test_a_camp_correction_opens_a_check_by_pull_and_closes_it_by_bundle(tmp_path: Path) -> None:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    fill = demo.units["203"]  # the channel fill in TR2; 202 is its cut
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        client = SyncClient(tablet, http, token)
        client.sync()  # the site set-up and the number block
        find = tablet.save_find(find=find_data(demo, number=tablet.next_find_number(), trench_id=fill.trench_id,
                                               unit_id=fill.id))
        with tablet.atomic() as conn:  # as the Record screen keeps them after a save
            keep_checks(conn, find.id, check_find(tablet, find))
        assert "UNIT_IS_CUT" not in _codes(tablet, find.id)
        client.sync()
        correct_record(server, record="find", key=str(find.number), changes={"unit": "202"},
                       reason="section drawing puts it in the cut's line", by="DM")
        tablet.set_setting("link.server", url)  # the Camp screen's Sync now
        link = CampLink(tablet, client_factory=lambda server, _verify: httpx.Client(base_url=server, timeout=30))
        report = link.sync()
        assert tablet.get(Find, find.id).unit_id == demo.units["202"].id
        assert "UNIT_IS_CUT" in _codes(tablet, find.id)  # opened on the tablet by what the pull brought
        assert report.rechecked is not None and report.rechecked.now_failing == [find.number]
        assert any(line.startswith("Last sync: ") and line.endswith(", checks changed on 1 find")
                   for line in link.status().lines())
        assert client.sync().rechecked is None  # nothing new came: the checks were not run again
    # the USB way back: the camp corrects it again, the tablet reads its return bundle
    usb = tmp_path / "usb"
    usb.mkdir()
    import_bundle(server, Path(export_bundle(tablet, usb)["path"]))  # tells the camp where the tablet stands
    correct_record(server, record="find", key=str(find.number), changes={"unit": "203"},
                   reason="washed: the fill's sand on it", by="DM")
    read = read_return_bundle(tablet, Path(write_for_tablet(server, label="TAB-1", out=usb)["path"]))
    assert tablet.get(Find, find.id).unit_id == fill.id
    assert "UNIT_IS_CUT" not in _codes(tablet, find.id)  # closed by what the bundle brought
    assert read.rechecked is not None and read.rechecked.cleared == [find.number]
    assert f"1 find passes a check it failed ({find.number})" in read.sentence()
    tablet.close()
    server.close()


def test_a_pull_that_brings_nothing_the_checks_read_runs_no_checks(tmp_path: Path) -> None:
    """Validating the whole site takes about a second at 100k finds: a pull that brought only what no check
    reads (a number block, a find's weight) leaves the kept checks alone, and they are right as they are."""
    from mobile.checks import recheck_arrived

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    a, device_a, token_a = enrolled_tablet(server, tmp_path / "a.sqlite", "TAB-1")
    b, _device_b, token_b = enrolled_tablet(server, tmp_path / "b.sqlite", "TAB-2")
    fill = demo.units["203"]
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        ca, cb = SyncClient(a, http, token_a), SyncClient(b, http, token_b)
        ca.sync()
        cb.sync()
        find = b.save_find(find=find_data(demo, number=b.next_find_number(), trench_id=fill.trench_id,
                                          unit_id=fill.id))
        cb.sync()
        came = ca.sync()  # another tablet's find: the checks read finds, so they run
        assert came.applied_versions and came.rechecked is not None and came.rechecked.checked >= 1

        server.issue_number_block(device_id=device_a.id, size=50)  # a new block: no check reads blocks
        block = ca.sync()
        assert block.applied_versions >= 1 and block.rechecked is None

        b.put(b.get(Find, find.id).model_copy(update={"weight_g": 12.5}))  # weight: no check reads it
        cb.sync()
        weight = ca.sync()
        assert a.get(Find, find.id).weight_g == 12.5 and weight.rechecked is None

        correct_record(server, record="find", key=str(find.number), changes={"unit": "202"},
                       reason="in the cut's line", by="DM")  # its unit: the checks read it
        moved = ca.sync()
        assert moved.rechecked is not None and moved.rechecked.now_failing == [find.number]
    # the checks left alone were right: all of them run again now change nothing
    again = recheck_arrived(a)
    assert again is not None and again.now_failing == [] and again.cleared == []
    a.close()
    b.close()
    server.close()
