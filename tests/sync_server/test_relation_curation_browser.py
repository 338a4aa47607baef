"""Voiding and restoring a relation from the unit page in a real headless Chromium (Debian's package, driven by
Playwright), as a data manager would at 390 px and 1366 px: from the cycle check on Checks to the unit, Void with
a reason beside the wrong relation, the matrix drawn again without the circle, then Restore. The page never
scrolls sideways. Screenshots are kept in the test's folder (relation-*.png)."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip  # noqa: E402

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from schema.records import Relation  # noqa: E402
from sync_server.app import create_app  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from sync_server.validation import run_validation  # noqa: E402
from tests.helpers import seeded_server  # noqa: E402

WIDTHS = {"phone": (390, 844), "laptop": (1366, 768)}


@pytest.mark.parametrize("width", list(WIDTHS))
def test_a_manager_voids_and_restores_a_relation_in_the_browser(tmp_path: Path, width: str) -> None:
    shots = tmp_path / "screenshots"
    shots.mkdir()
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    wrong = server.add(Relation(site_id=demo.site.id, upper_unit_id=demo.units["103"].id,
                                lower_unit_id=demo.units["101"].id, kind="above"))
    run_validation(server)
    manager = server.add_device(label="MGR", role="manager")[1]
    w, h = WIDTHS[width]
    with serve_in_thread(create_app(store=server)) as base, playwright_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS)
        page = browser.new_page(viewport={"width": w, "height": h})
        page.goto(f"{base}/camp/sign-in")
        page.fill("#token", manager)
        page.click("button:has-text('Sign in')")
        page.wait_for_url(f"{base}/camp/")
        page.goto(f"{base}/camp/matrix")
        assert "The matrix has a cycle" in page.content()
        page.click("header >> text=Checks")
        page.click("a:has-text('units 101, 102=204=302, 103')")
        page.wait_for_url("**/camp/units/*")
        card = page.locator(f"#relation-{wrong.id}")
        card.locator("button").click()  # no reason: the browser asks for one, nothing is sent
        assert not server.get(Relation, wrong.id).voided
        card.locator("input[name=reason]").fill("misread the section: 103 lies under 101")
        card.locator("input[name=by]").fill("DM")
        card.scroll_into_view_if_needed()
        page.screenshot(path=str(shots / f"relation-{width}-before.png"), full_page=True)
        card.locator("button:has-text('Void')").click()
        page.wait_for_url("**/camp/units/*?message=*")
        assert server.get(Relation, wrong.id).voided
        status = page.locator("p[role=status]").inner_text()
        assert status.startswith("relation 103 above 101 voided: it no longer counts in the matrix"), status
        assert page.locator(f"#relation-{wrong.id} del").inner_text() == "103 above 101"
        overflow = page.evaluate("document.documentElement.scrollWidth - window.innerWidth")
        assert overflow <= 0, f"the unit page scrolls sideways by {overflow} px at {w} px"
        page.screenshot(path=str(shots / f"relation-{width}-voided.png"), full_page=True)
        page.goto(f"{base}/camp/matrix")  # validation ran again after the answer: no circle, no red outline
        assert "The matrix has a cycle" not in page.content()
        page.goto(f"{base}/camp/units/{demo.units['101'].id}")
        card = page.locator(f"#relation-{wrong.id}")
        card.locator("input[name=reason]").fill("the section drawing shows it was right")
        card.locator("input[name=by]").fill("DM")
        card.locator("button:has-text('Restore')").click()
        page.wait_for_url("**/camp/units/*?message=*")
        assert not server.get(Relation, wrong.id).voided
        assert page.locator(f"#relation-{wrong.id} del").count() == 0
        page.screenshot(path=str(shots / f"relation-{width}-restored.png"), full_page=True)
        browser.close()
    server.close()
    print(f"screenshots: {shots}")
