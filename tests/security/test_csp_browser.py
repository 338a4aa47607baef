"""The camp pages' Content-Security-Policy in a real browser (Debian's Chromium, driven by Playwright): every
page a manager opens, its styles applied and its picture shown, with not one policy violation reported, and no
page shown inside another page's frame."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from sync_server.app import ROUTE_ROLES, create_app  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from tests.helpers import safety_day, seeded_server  # noqa: E402


def test_every_camp_page_keeps_its_policy_in_a_browser(tmp_path: Path) -> None:
    import httpx

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    manager = server.add_device(label="MGR", role="manager")[1]
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=60) as http:
        bone = safety_day(server, demo, http, tmp_path)
        paths = [k.split(" ", 1)[1].replace("{find_id}", str(bone.id)).replace("{unit_id}", str(demo.units["101"].id))
                 for k, v in ROUTE_ROLES.items() if k.startswith("GET /camp") and v.startswith("page")
                 and not k.endswith(("matrix.png", "download")) and "{sha256}" not in k]  # picture files
        with playwright_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS)
            page = browser.new_page()
            violations: list[str] = []
            page.on("console", lambda m: violations.append(m.text) if "Content Security Policy" in m.text else None)
            page.goto(f"{base}/camp/sign-in")
            button = page.locator("button:has-text('Sign in')")
            assert button.evaluate("b => getComputedStyle(b).backgroundColor") == "rgb(255, 212, 0)"
            page.fill("#token", manager)
            button.click()
            page.wait_for_url(f"{base}/camp/")
            for path in paths:
                page.goto(base + path)
                assert page.locator("header").evaluate("h => getComputedStyle(h).backgroundColor") == "rgb(17, 17, 17)", path
            page.goto(f"{base}/camp/matrix")  # the matrix is drawn inline (SVG), in a frame styled by the sheet
            picture = page.locator(".matrix-view svg.matrix")
            picture.wait_for()
            assert picture.evaluate("s => s.querySelectorAll('text').length") > 0
            assert page.locator(".matrix-view").evaluate("v => getComputedStyle(v).borderTopWidth") == "2px"
            assert violations == []
            # a page of another origin framing a camp page gets nothing shown
            other = browser.new_page()
            other.set_content(f'<iframe id="f" src="{base}/camp/sign-in"></iframe>'  # set_content waits for load
                              '<iframe id="g" srcdoc="<button>a frame that may be shown</button>"></iframe>')
            assert other.frame_locator("#g").locator("button").count() == 1  # framing itself works here...
            assert other.frame_locator("#f").locator("button").count() == 0  # ...but not of a camp page
            browser.close()
