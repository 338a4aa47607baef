"""The Camp screen's Read bundle, in a real window: a tablet enrolled at camp and then only on USB reads the
return bundle the camp wrote for it from the stick's folder (the site and its find numbers arrive), a second
tap changes nothing and says so, a tampered bundle is refused with the reason. Screenshots are kept."""

from __future__ import annotations

import zipfile
from pathlib import Path

import pytest

from schema.records import Find, Trench

pytestmark = pytest.mark.ui


def _tamper(good: Path, bad: Path) -> None:
    with zipfile.ZipFile(good) as zin, zipfile.ZipFile(bad, "w") as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            zout.writestr(item, data.replace(b'"TR1"', b'"TR9"') if item.filename.startswith("pages/") else data)


def test_read_bundle_on_the_camp_screen(tmp_path, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    from sync_server.bundles import write_for_tablet
    from tests.helpers import enrolled_tablet, find_data, seeded_server

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, _token = enrolled_tablet(server, tmp_path / "TAB-5.sqlite", "TAB-5")
    tablet.close()
    stick = tmp_path / "stick"
    stick.mkdir()
    written = write_for_tablet(server, label="TAB-5", out=stick)
    bad = tmp_path / "TAB-5-from-camp-tampered.baulkreturn"
    _tamper(Path(written["path"]), bad)

    d = run_app(tmp_path / "TAB-5.sqlite")
    link = d.nav("link")
    assert "Find numbers left: 0" in link.status  # enrolled, nothing received yet
    d.type(link.ids.bundle_folder, str(bad))
    d.tap(link.ids.read_bundle)
    assert link.problem.startswith(f"PROBLEM: {bad.name}: page 1 does not match its hash; it was changed after the "
                                   "camp server wrote it. Nothing was read: "), link.problem
    assert link.outcome == ""
    d.screenshot(shots, "camp-bundle-refused")
    assert d.app.store.count(Trench) == 0

    d.type(link.ids.bundle_folder, str(stick))
    d.tap(link.ids.read_bundle)
    assert link.problem == "", link.problem
    name = Path(written["path"]).name
    assert link.outcome == (f"Read {name}: {written['versions']} new changes on this tablet. New find numbers: 1-100. "
                            "Find numbers left: 100."), link.outcome
    assert "Find numbers left: 100" in link.status and "Last bundle from camp: " in link.status
    d.screenshot(shots, "camp-bundle-read")
    assert d.app.store.count(Trench) == len(demo.trenches)

    d.tap(link.ids.read_bundle)
    assert link.outcome.startswith(f"{name} was read before: this tablet already holds every change"), link.outcome
    d.screenshot(shots, "camp-bundle-read-again")
    # and the tablet records with the numbers that came by USB
    saved = d.app.store.save_find(find=find_data(demo, number=d.app.store.next_find_number()))
    assert saved.number == 1 and d.app.store.count(Find) == 1
    server.close()
