"""The curation pages in a real headless Chromium (Debian's package, driven by Playwright): readable on a phone at
390 px and a laptop at 1366 px (the page never scrolls sideways; wide tables scroll inside their box), a horizon
moved with its button, units assigned, and a laboratory CSV uploaded from the browser's own file input.
Screenshots are kept in the test's folder."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.helpers import CHROMIUM_FLAGS, chromium_or_skip  # noqa: E402

pytestmark = pytest.mark.browser
CHROMIUM, playwright_api = chromium_or_skip()

from schema.demo_site import fit_demo_grid  # noqa: E402
from schema.records import AgeDetermination, Find, Unit  # noqa: E402
from sync_server.app import create_app  # noqa: E402
from sync_server.curation import list_horizons  # noqa: E402
from sync_server.loopback import serve_in_thread  # noqa: E402
from tests.helpers import find_data, seeded_server  # noqa: E402

FLAGS = CHROMIUM_FLAGS
WIDTHS = {"phone": (390, 844), "laptop": (1366, 768)}


def test_curation_pages_fit_a_phone_and_a_laptop(tmp_path: Path) -> None:
    shots = tmp_path / "screenshots"
    shots.mkdir()
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    server.put(fit_demo_grid(demo)[0])
    flake = server.add(Find(**find_data(demo, number=5)))
    manager = server.add_device(label="MGR", role="manager")[1]
    lab = tmp_path / "lab.csv"
    lab.write_text("unit,method,age_ka,sigma_ka,lab_code\n101,radiocarbon,12.48,0.21,VLM-RC-11\n")
    pages = ["/camp/horizons", "/camp/dates", "/camp/site", f"/camp/finds/{flake.id}",
             f"/camp/units/{demo.units['101'].id}"]
    with serve_in_thread(create_app(store=server)) as base, playwright_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=FLAGS)
        for name, (width, height) in WIDTHS.items():
            page = browser.new_page(viewport={"width": width, "height": height})
            page.goto(f"{base}/camp/sign-in")
            page.fill("#token", manager)
            page.click("button:has-text('Sign in')")
            page.wait_for_url(f"{base}/camp/")
            for i, path in enumerate(pages):
                page.goto(f"{base}{path}")
                page.screenshot(path=str(shots / f"{name}-{i}.png"), full_page=True)
                overflow = page.evaluate("document.documentElement.scrollWidth - window.innerWidth")
                assert overflow <= 0, f"{path} scrolls sideways by {overflow} px at {width} px"
            page.close()

        page = browser.new_page(viewport={"width": 390, "height": 844})
        page.goto(f"{base}/camp/sign-in")
        page.fill("#token", manager)
        page.click("button:has-text('Sign in')")
        page.wait_for_url(f"{base}/camp/")
        page.click("header >> text=Horizons")
        page.click("button[aria-label='move H3 up']")
        page.wait_for_url("**/camp/horizons?message=*")
        assert [h["code"] for h in list_horizons(server)] == ["H1", "H3", "H2", "H4"]
        page.click("button[aria-label='move H3 down']")
        page.wait_for_url("**/camp/horizons?message=*")
        page.select_option("select[name=horizon]", "H2")
        page.fill("input[name=units]", "103")
        page.fill("input[name=reason]", "tuff lens at the top of 103")
        page.fill("input[name=by]", "DM")
        page.click("button:has-text('Assign')")
        page.wait_for_url("**/camp/horizons?message=*")
        assert server.get(Unit, demo.units["103"].id).horizon_id == demo.horizons["H2"].id
        assert "tuff lens at the top of 103" in page.content()
        page.click("header >> text=Dates")
        page.set_input_files("input[name=file]", str(lab))
        page.click("button:has-text('Import')")
        page.wait_for_url("**/camp/dates?message=*")
        assert "imported lab.csv: 1 dates added" in page.content()
        assert server.list(AgeDetermination, lab_code="VLM-RC-11")[0].sigma_ka == 0.21
        page.screenshot(path=str(shots / "dates-imported.png"), full_page=True)
        browser.close()
    server.close()
    print(f"screenshots: {shots}")
