"""The camp link (issue 18 item 4): the camp server's address is its own setting that Sync uses, and a tablet
that is already enrolled is refused on the tablet, before a one-time code is spent."""

from __future__ import annotations

from typing import Any

import pytest
from fastapi.testclient import TestClient

from mobile.controllers import CampLink
from mobile.store import TabletStore
from schema.errors import EnrolmentRefused
from sync_server.app import create_app
from sync_server.devices import make_code


def test_a_new_camp_address_is_used_by_sync_and_re_enrolling_spends_no_code(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, _http, tmp = camp
    app = create_app(store=server)
    used: list[str] = []

    def client(address: str, _verify: Any) -> TestClient:  # in-process: the address is only recorded
        used.append(address)
        return TestClient(app, base_url=address)

    tablet = TabletStore.open(tmp / "tab9.sqlite")
    link = CampLink(tablet, client_factory=client)
    _device, code, _exp = make_code(server, label="TAB-9", role="recorder")
    with pytest.raises(EnrolmentRefused, match=r"'camp laptop' is not a camp server address; type it as the data "
                                               r"manager shows it, e\.g\. https://192\.168\.8\.10:8765"):
        link.enrol(code, server="camp laptop")
    assert used == []  # refused on the tablet: nothing was sent, the code is still good
    assert link.enrol(code, server="http://camp-a.invalid:8765/").label == "TAB-9"
    link.sync()
    assert used[-1] == "http://camp-a.invalid:8765"
    # the camp laptop moved: a typed address is kept and Sync follows it
    assert link.set_server(" http://camp-b.invalid:8765 ") == "http://camp-b.invalid:8765"
    link.sync()
    assert used[-1] == "http://camp-b.invalid:8765" and link.status().server == "http://camp-b.invalid:8765"
    # enrolling again is refused before the new code leaves the tablet; another tablet can still use that code
    _other, second, _exp = make_code(server, label="TAB-10", role="recorder")
    calls = len(used)
    with pytest.raises(EnrolmentRefused) as refused:
        link.enrol(second, server="http://camp-b.invalid:8765")
    assert str(refused.value) == ("this tablet is already enrolled as TAB-9; the code was not used. To follow a new "
                                  "camp address, type it and tap Save address")
    assert len(used) == calls
    fresh = CampLink(TabletStore.open(tmp / "tab10.sqlite"), client_factory=client)
    assert fresh.enrol(second, server="http://camp-b.invalid:8765").label == "TAB-10"


@pytest.mark.parametrize(("pending", "line"), [(0, "Waiting to be sent: 0 changes"), (1, "Waiting to be sent: 1 change"),
                                               (2, "Waiting to be sent: 2 changes")])
def test_the_camp_status_counts_changes_in_the_right_number(pending: int, line: str) -> None:
    """Issue 18 item 11: "1 change", never "1 changes" (English grammar, no source needed)."""
    from mobile.controllers.link import LinkStatus

    status = LinkStatus(enrolled=True, device="TAB-1", server="https://camp.invalid:8765", pending_versions=pending,
                        numbers_left=90, last_sync=None, last_error=None)
    assert line in status.lines()
