"""The camp pages in a real headless Chromium (Debian's package, driven by Playwright), at phone width:
sign in, settle a conflict two tablets made and see a tablet pull the result, accept a check with a reason,
read the day's shoring check on Safety, download an export; then every page at 1366 and 390 px. Screenshots are
kept in ``test-output/browser/<test>/`` (``BAULK_BROWSER_SHOTS`` to change; printed at the end), as the UI suite
keeps its own."""

from __future__ import annotations

import datetime as dt
import io
import os
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
SHOTS = Path(os.environ.get("BAULK_BROWSER_SHOTS", Path(__file__).resolve().parents[2] / "test-output" / "browser"))


def _shots(name: str) -> Path:
    """A fresh folder for one test's screenshots, kept after the run."""
    import shutil

    folder = SHOTS / name
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    return folder


def test_a_manager_works_through_the_evening_in_a_browser(tmp_path: Path) -> None:
    shots = _shots("evening")
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


def test_every_camp_page_reads_well_on_a_laptop_and_a_phone(tmp_path: Path) -> None:
    """Real Chromium at 1366 and 390 px on every camp page: nothing wider than the screen, codes and site-zone
    times instead of ids and UTC stamps, the Finds list paged newest first, the matrix drawn as SVG text that
    keeps its size (scrolling in its own frame), outlined exactly where Checks has open checks."""
    import re

    from schema.records import Device, Relation, Site, Trench, Unit
    from sync_server.validation import accept_issue, list_issues, run_validation

    shots = _shots("every-page")
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    server.put(server.list(Site)[0].model_copy(update={"timezone": "Africa/Nairobi"}))  # UTC+3, no summer time
    manager = server.add_device(label="MGR", role="manager")[1]
    start = dt.datetime(2026, 7, 3, 5, 0, 7, 123456, tzinfo=dt.timezone.utc)  # 08:00:07.123456 in Nairobi
    with serve_in_thread(create_app(store=server)) as base, httpx.Client(base_url=base, timeout=60) as http:
        (t1, c1), (t2, c2) = [(t, SyncClient(t, http, token)) for t, _d, token in
                              (enrolled_tablet(server, tmp_path / f"{n}.sqlite", n) for n in ("TAB-1", "TAB-2"))]
        c1.sync()
        c2.sync()
        made = [t1.save_find(find=find_data(demo, number=t1.next_find_number(), found_at=start + dt.timedelta(minutes=7 * i),
                                            material=("obsidian", "chert", "other_stone")[i % 3]))
                for i in range(58)]
        low = t1.save_find(find=find_data(demo, number=t1.next_find_number(), z=99.30, found_at=start))
        high = t1.save_find(find=find_data(demo, number=t1.next_find_number(), unit_id=demo.units["102"].id,
                                           found_at=start + dt.timedelta(minutes=1)))
        c1.sync()
        c2.sync()
        u101 = demo.units["101"]
        t1.put(t1.get(Unit, u101.id).model_copy(update={"description": "silt, rootlets"}))
        t2.put(t2.get(Unit, u101.id).model_copy(update={"description": "silt, laminated"}))
        c1.sync()
        c2.sync()
        run_validation(server)
        on_102 = [i for i in list_issues(server) if i["unit"] == "102"]
        assert on_102, "the find above unit 102 gives a check"
        for i in on_102:
            accept_issue(server, key=i["key"], by="MGR", reason="ash lens seen in the section")
        opened = [i for i in list_issues(server, include_accepted=False)]
        assert {i["unit"] for i in opened} == {"101"}  # open checks name unit 101 only (through its find)

        ids = {str(x.id)[:8] for model in (Unit, Trench, Relation, Device) for x in server.list(model)}
        ids |= {str(f.id)[:8] for f in [*made, low, high]}
        newest = max(made, key=lambda f: f.found_at)
        pages = {"today": "/camp/", "conflicts": "/camp/conflicts", "checks": "/camp/checks", "finds": "/camp/finds",
                 "finds-2": "/camp/finds?page=2", "find": f"/camp/finds/{low.id}", "safety": "/camp/safety",
                 "matrix": "/camp/matrix", "horizons": "/camp/horizons", "dates": "/camp/dates", "site": "/camp/site",
                 "unit": f"/camp/units/{u101.id}", "exports": "/camp/exports"}
        with playwright_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=FLAGS)
            for width, height in ((1366, 768), (390, 844)):
                page = browser.new_page(viewport={"width": width, "height": height})
                page.goto(f"{base}/")  # the bare address opens the camp pages
                assert page.url == f"{base}/camp/sign-in"
                page.fill("#token", manager)
                page.click("button:has-text('Sign in')")
                page.wait_for_url(f"{base}/camp/")
                for name, path in pages.items():
                    page.goto(f"{base}{path}")
                    page.screenshot(path=str(shots / f"{width}-{name}.png"), full_page=True)
                    wide = page.evaluate("document.documentElement.scrollWidth")
                    assert wide <= width, f"{name} at {width} px is {wide} px wide"
                    text = page.inner_text("body")
                    assert not [i for i in ids if re.search(rf"\b{i}", text)], f"{name} shows an id"
                    assert not re.search(r"\d\d:\d\d:\d\d|UTC|\+00:00", text), f"{name} shows a raw time"
                # the Finds list: newest first, 50 a page, and its table fits the screen
                page.goto(f"{base}/camp/finds")
                assert page.inner_text("#shown") == "Finds 1-50 of 60, newest first."
                assert page.inner_text("table.finds tr:nth-child(1) td:nth-child(1)") == str(newest.number)
                assert page.evaluate("document.querySelector('table.finds').scrollWidth") <= width
                page.click("text=Older")
                assert page.inner_text("#shown") == "Finds 51-60 of 60, newest first."
                # a find reads as a record: labels, codes, site-zone time; its history below
                page.goto(f"{base}/camp/finds/{high.id}")
                record = page.inner_text("main")
                card = record[:record.index("History")]
                assert "Trench TR1, unit 102" in card and "Found at\n2026-07-03 08:01 EAT" in card
                assert "Weight (g)" not in card  # a field with no value is left out
                # the conflict names the unit by its code
                page.goto(f"{base}/camp/conflicts")
                assert "unit 101: description" in page.inner_text("main")
                # Checks counts what is open; accepted ones are told apart
                page.goto(f"{base}/camp/checks")
                assert page.inner_text("#count") == f"1 open check; {len(on_102)} accepted, listed below."
                # the matrix: SVG text at its own size, outlined where Checks has an open check, scrolling inside
                page.goto(f"{base}/camp/matrix")
                boxes = page.evaluate("""[...document.querySelectorAll('svg.matrix a')].map(a => ({
                    text: a.querySelector('text').textContent, stroke: a.querySelector('rect').getAttribute('stroke'),
                    size: a.querySelector('text').getBoundingClientRect().height}))""")
                red = {b["text"] for b in boxes if b["stroke"] == "#c00000"}
                assert red == {"101 (1)"}, red
                assert min(b["size"] for b in boxes) >= 14  # readable at phone width too, not shrunk
                frame = page.evaluate("(() => { const v = document.querySelector('.matrix-view');"
                                      " return [v.clientWidth, v.scrollWidth]; })()")
                assert frame[0] <= width
                page.screenshot(path=str(shots / f"{width}-matrix-view.png"))
                page.close()
            browser.close()
    server.close()
    print(f"screenshots: {shots}")
