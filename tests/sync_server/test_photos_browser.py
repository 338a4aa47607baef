"""The photo register and a find's photos in a real headless Chromium (Debian's package, Playwright), at phone
width: the thumbnails load (the pages' CSP allows same-origin images only) and a thumbnail opens the photo full
size. Screenshots go to the test's folder."""

from __future__ import annotations

from pathlib import Path

import httpx
import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip  # noqa: E402

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from mobile.photos import save_photo, upload_photos  # noqa: E402
from sync_server.app import create_app  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from tests.helpers import find_data, seeded_server, synced_tablet  # noqa: E402
from tests.sync_server.test_photos import jpeg  # noqa: E402


def test_a_manager_sees_the_photos_of_a_find_and_opens_one(tmp_path: Path) -> None:
    shots = Path(__import__("os").environ.get("BAULK_PHOTO_SHOTS", tmp_path))
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    manager = server.add_device(label="MGR", role="manager")[1]
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=60) as http:
        tablet, client = synced_tablet(server, http, tmp_path, "TAB-1")
        found = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        data = jpeg(800, 600, seed=11)
        photo = save_photo(tablet, data=data, subject="find", subject_id=found.id, site_id=demo.site.id, by="AK",
                           caption="in place before lifting", facing="N", scale_in_frame=True,
                           north_arrow_in_frame=True)
        client.sync()
        upload_photos(tablet, http, tablet.token())
        with playwright_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS)
            page = browser.new_page(viewport={"width": 390, "height": 844})
            page.goto(f"{base}/camp/sign-in")
            page.fill("#token", manager)
            page.click("button:has-text('Sign in')")
            page.wait_for_url(f"{base}/camp/")
            page.goto(f"{base}/camp/finds/{found.id}")
            img = page.locator(f"img[src='/camp/photos/{photo.sha256}/thumb.png']")
            img.scroll_into_view_if_needed()
            assert img.evaluate("i => i.complete && i.naturalWidth") == 320  # loaded, not blocked
            page.screenshot(path=str(shots / "photos-1-find.png"), full_page=True)
            page.goto(f"{base}/camp/photos")
            assert page.locator("table.photos img").count() == 1
            page.screenshot(path=str(shots / "photos-2-register.png"), full_page=True)
            with page.expect_response(lambda r: r.url.endswith(f"/camp/photos/{photo.sha256}")) as answer:
                page.click("table.photos a")
            assert answer.value.status == 200 and answer.value.body() == data
            browser.close()
    tablet.close()
    server.close()
