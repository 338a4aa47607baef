"""The camp pages in a real headless Chromium (Debian's package, driven by Playwright), at phone width:
sign in, settle a conflict two tablets made and see a tablet pull the result, accept a check with a reason,
read the day's shoring check on Safety, download an export. Screenshots are kept in the test's folder (printed at the end)."""

from __future__ import annotations

import datetime as dt
import io
import zipfile
from pathlib import Path

import httpx
import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip  # noqa: E402

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from mobile.sync import SyncClient  # noqa: E402
from schema.records import Find, SafetyCheck  # noqa: E402
from sync_server.app import create_app  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from sync_server.sync import list_conflicts  # noqa: E402
from tests.helpers import enrolled_tablet, find_data, seeded_server, unit_conflict  # noqa: E402

FLAGS = CHROMIUM_FLAGS


def test_a_manager_works_through_the_evening_in_a_browser(tmp_path: Path) -> None:
    shots = tmp_path / "screenshots"
    shots.mkdir()
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    manager = server.add_device(label="MGR", role="manager")[1]
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=60) as http:
        tablets = []
        for label in ("TAB-1", "TAB-2"):
            tablet, _d, token = enrolled_tablet(server, tmp_path / f"{label}.sqlite", label)
            client = SyncClient(tablet, http, token)
            client.sync()
            tablets.append((tablet, client))
        (t1, c1), (t2, c2) = tablets
        find = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
        low = t1.save_find(find=find_data(demo, number=t1.next_find_number(), z=99.30))  # a check: below its unit
        t1.add(SafetyCheck(site_id=demo.site.id, trench_id=demo.units["101"].trench_id, unit_id=demo.units["101"].id,
                           kind="shoring", depth_m=1.31, answer="east face benched; checked by JT", recorder="AK",
                           checked_at=dt.datetime.now(dt.timezone.utc)))
        unit_conflict(demo, (t1, c1), (t2, c2), find)
        assert len(list_conflicts(server)) == 1

        with playwright_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=FLAGS)
            page = browser.new_page(viewport={"width": 390, "height": 844}, accept_downloads=True)  # a phone
            page.goto(f"{base}/camp/")
            assert page.url.endswith("/camp/sign-in")
            page.screenshot(path=str(shots / "1-sign-in.png"), full_page=True)
            page.fill("#token", manager)
            page.click("button:has-text('Sign in')")
            page.wait_for_url(f"{base}/camp/")
            assert "TAB-1" in page.content() and "1</span> conflict waits" in page.content()
            page.screenshot(path=str(shots / "2-today.png"), full_page=True)

            page.click("header >> text=Conflicts")
            page.wait_for_url(f"{base}/camp/conflicts")
            page.screenshot(path=str(shots / "3-conflict.png"), full_page=True)
            page.check(f"input[name=choice][value='\"{demo.units['102'].id}\"']")
            page.click("button:has-text('Keep this value')")
            page.wait_for_selector("text=settled")
            assert "No conflict waits." in page.content()
            page.screenshot(path=str(shots / "4-settled.png"), full_page=True)

            page.click("header >> text=Checks")
            page.fill("input[name=code]", "POS_BELOW_UNIT")
            page.click("button:has-text('Show')")
            page.fill("input[name=reason]", "bioturbation seen in the section")
            page.click("button:has-text('Accept with this reason')")
            page.wait_for_selector("text=Accepted by MGR: bioturbation seen in the section")
            page.screenshot(path=str(shots / "5-check-accepted.png"), full_page=True)

            page.click("header >> text=Safety")
            page.select_option("select[name=kind]", "shoring")
            page.click("button:has-text('Show')")
            page.wait_for_selector("text=east face benched; checked by JT")
            assert "1 safety check, newest first." in page.content()
            page.screenshot(path=str(shots / "6-safety.png"), full_page=True)

            page.click("header >> text=Exports")
            with page.expect_download() as got:
                page.click("button:has-text('Run the export and download it')")
            target = tmp_path / "export.zip"
            got.value.save_as(str(target))
            assert "baulk-export/manifest.json" in zipfile.ZipFile(io.BytesIO(target.read_bytes())).namelist()
            page.screenshot(path=str(shots / "7-exports.png"), full_page=True)
            browser.close()

        c2.sync()  # the resolution travels to the tablet that lost
        assert t2.get(Find, find.id).unit_id == demo.units["102"].id
    assert server.list(Find, id=low.id)
    server.close()
    for name in ("1-sign-in", "2-today", "3-conflict", "4-settled", "5-check-accepted", "6-safety", "7-exports"):
        assert (shots / f"{name}.png").stat().st_size > 5000
    print(f"screenshots: {shots}")
