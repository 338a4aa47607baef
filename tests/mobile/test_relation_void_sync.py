"""A relation voided on one tablet reaches the camp and another tablet as a version like every edit (issue 18,
item 12): both see it voided with its reason, and the camp's checks leave it out of the matrix."""

from __future__ import annotations

from typing import Any

from fastapi.testclient import TestClient

from mobile.controllers import CampLink, UnitsController
from mobile.store import TabletStore
from schema.records import Relation, Unit
from sync_server.app import create_app
from sync_server.devices import make_code
from tests.helpers import start_field_day


def test_a_void_syncs_to_the_camp_and_to_another_tablet(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, _http, tmp = camp
    app = create_app(store=server)

    def client(address: str, _verify: Any) -> TestClient:
        return TestClient(app, base_url=address)

    links = []
    for label in ("TAB-1", "TAB-2"):
        _device, code, _exp = make_code(server, label=label, role="recorder")
        link = CampLink(TabletStore.open(tmp / f"{label}.sqlite"), client_factory=client)
        link.enrol(code, server="http://camp.invalid:8765")
        link.sync()
        links.append(link)
    one, two = (link.store for link in links)
    days, _truth = start_field_day(one, demo)
    units = UnitsController(one, days)
    wrong = units.relate(upper="104", lower="101", kind="above").relation  # closes a circle with 101-102-103-104
    done = units.void_relation(wrong.id, "104 lies at the bottom: typed the wrong way round")
    assert "MATRIX_CYCLE" not in [i.code for i in done.issues]
    links[0].sync()
    at_camp = server.get(Relation, wrong.id)
    assert (at_camp.voided, at_camp.void_reason) == (True, "104 lies at the bottom: typed the wrong way round")
    links[1].sync()
    there = two.get(Relation, wrong.id)
    assert (there.voided, there.void_reason) == (True, "104 lies at the bottom: typed the wrong way round")
    from schema.strata import validate

    report = validate(server.site_data())
    assert "MATRIX_CYCLE" not in {i.code for i in report.issues}
    codes = {u.id: u.code for u in server.list(Unit)}
    assert (codes[at_camp.upper_unit_id], codes[at_camp.lower_unit_id]) == ("104", "101")
    for link in links:
        link.store.close()
