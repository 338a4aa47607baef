"""A manager voids a wrong photo from the Photos register in a real headless Chromium (Debian's package,
Playwright), at phone width: the Void form under the photo posts with the reason and initials, the register keeps
the photo struck through with its reason, and its find's page offers Restore. Screenshots go to the test's folder
(or BAULK_PHOTO_SHOTS)."""

from __future__ import annotations

import os
import re
from pathlib import Path

import httpx
import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip  # noqa: E402

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from mobile.photos import save_photo, upload_photos  # noqa: E402
from schema.records import Find, Photo  # noqa: E402
from sync_server.app import create_app  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from tests.helpers import find_data, seeded_server, synced_tablet  # noqa: E402
from tests.sync_server.test_photos import jpeg  # noqa: E402


def test_a_manager_voids_a_photo_from_the_register(tmp_path: Path) -> None:
    shots = Path(os.environ.get("BAULK_PHOTO_SHOTS", tmp_path))
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    manager = server.add_device(label="MGR", role="manager")[1]
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=60) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        found = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        blurred, sharp = (save_photo(tablet, data=jpeg(400, 300, seed=s), subject="find", subject_id=found.id,
                                     site_id=demo.site.id, by="AK", caption=c, facing="N", scale_in_frame=True)
                          for s, c in ((41, "in place, blurred"), (42, "in place before lifting")))
        client.sync()
        upload_photos(tablet, http, tablet.token())
        with playwright_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS)
            page = browser.new_page(viewport={"width": 390, "height": 844})
            page.goto(f"{base}/camp/sign-in")
            page.fill("#token", manager)
            page.click("button:has-text('Sign in')")
            page.wait_for_url(f"{base}/camp/")
            page.goto(f"{base}/camp/photos")
            row = page.locator(f"#photo-{blurred.id}")
            row.locator("input[name=reason]").fill("blurred duplicate of P2")
            row.locator("input[name=by]").fill("DM")
            row.get_by_role("button", name="void photo TAB-1-P1").click()
            page.wait_for_url(re.compile(r".*/camp/photos\?message=.*"))
            assert page.locator("p.card[role=status]").inner_text().startswith("photo TAB-1-P1 (find ")
            row = page.locator(f"#photo-{blurred.id}")
            assert row.locator("del").inner_text().startswith("TAB-1-P1")
            assert "Why voided: blurred duplicate of P2 (camp, DM)" in row.inner_text()
            assert row.get_by_role("button", name="restore photo TAB-1-P1").count() == 1
            page.screenshot(path=str(shots / "photo-void-1-register.png"), full_page=True)
            page.goto(f"{base}/camp/finds/{found.id}")
            assert page.get_by_role("button", name="restore photo TAB-1-P1").count() == 1
            assert page.get_by_role("button", name="void photo TAB-1-P2").count() == 1
            page.screenshot(path=str(shots / "photo-void-2-find.png"), full_page=True)
            browser.close()
    assert server.get(Photo, blurred.id).voided
    assert server.get(Find, found.id).photo_hashes == [sharp.sha256]
    tablet.close()
    server.close()
