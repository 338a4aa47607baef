"""The tablet app in a real window, driven by touches: every screen opens (a screenshot of each is kept), and a
scripted day records three finds (plotted from a simulated shot, by GNSS, from the sieve), prints their labels
and syncs to a real camp server on loopback, which then holds exactly those finds."""

from __future__ import annotations

import pytest

from schema.records import Find

pytestmark = pytest.mark.ui


def _start_day(d, trench: str = "TR1") -> None:  # type: ignore[no-untyped-def]
    day = d.nav("day")
    d.choose(day.ids.trench, trench)
    d.type(day.ids.recorder, "AK")
    d.tap(day.ids.start)
    assert day.problem == "", day.problem
    assert "HEAT:" in day.cautions and "LASER" in day.cautions.upper()


def _set_up_instrument(d) -> None:  # type: ignore[no-untyped-def]
    day = d.screen("day")
    d.choose(day.ids.station, "CP1")
    d.choose(day.ids.bs1_point, "CP2")
    d.tap(day.ids.bs1_read)
    d.choose(day.ids.bs2_point, "CP3")
    d.tap(day.ids.bs2_read)
    assert day.ids.bs1_line.text.startswith("BKS,1,")
    d.tap(day.ids.compute)
    assert day.problem == "", day.problem
    assert day.residuals.startswith("Residuals:\nCP2: angle +0.0000 deg")
    d.type(day.ids.laser_by, "AK")
    d.tap(day.ids.accept)
    assert day.setup_state.startswith("Setup accepted: station CP1")


def test_every_screen_opens_and_is_captured(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    assert d.app.root.ids.manager.current == "day"  # a new day starts on Day
    d.screenshot(shots, "day-empty")
    _start_day(d)
    _set_up_instrument(d)
    d.screenshot(shots, "day-setup")
    for name in ("record", "units", "finds", "labels", "link"):
        screen = d.nav(name)
        assert screen.problem == "", (name, screen.problem)
        path = d.screenshot(shots, name)
        assert path.exists() and path.stat().st_size > 10_000, path
    from PIL import Image

    with Image.open(path) as img:  # the window really drew: a 800 x 1280 picture with more than one colour
        assert img.size == (800, 1280) and len(img.convert("L").getcolors(1 << 16) or []) > 2
    # turned to landscape, Record puts the form and the position side by side
    d.window.size = (1280, 800)
    d.pump(10)
    try:
        rec = d.nav("record")
        d.pump(5)
        grid = rec.ids.form.parent.parent
        assert grid.cols == 2
        # the offscreen EGL surface keeps its first size, so this picture is drawn through an Fbo of the root
        # widget (Widget.export_to_png) rather than read off the window
        d.app.root.export_to_png(str(shots / "record-landscape.png"))
        with Image.open(shots / "record-landscape.png") as img:
            assert img.size == (1280, 800)
    finally:
        d.window.size = (800, 1280)
        d.pump(5)


def test_a_recorded_day_reaches_the_camp_server(tmp_path, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    from mobile.store import TabletStore
    from sync_server.app import create_app
    from sync_server.devices import make_code
    from sync_server.loopback import serve_in_thread
    from tests.helpers import seeded_server

    from schema.demo_site import fit_demo_grid

    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    server.put(fit_demo_grid(demo)[0])  # the data manager has fitted the site grid (GNSS finds need it)
    _device, code, _exp = make_code(server, label="TAB-7", role="recorder")
    TabletStore.open(tmp_path / "tab7.sqlite").close()
    with serve_in_thread(create_app(store=server)) as url:
        d = run_app(tmp_path / "tab7.sqlite", simulate=True)
        # enrol and receive the site
        link = d.nav("link")
        d.type(link.ids.server, url)
        d.type(link.ids.code, code)
        d.tap(link.ids.enrol)
        assert link.problem == "" and link.outcome.startswith("Enrolled as TAB-7"), link.problem
        d.tap(link.ids.sync)
        d.until(lambda: not link.busy, what="the first sync")
        assert link.problem == "", link.problem
        assert "Find numbers left: " in link.status
        _start_day(d)
        _set_up_instrument(d)
        d.tap(d.screen("day").ids.read_gnss)
        assert d.screen("day").gnss.startswith("RTK fixed"), (d.screen("day").problem, d.screen("day").gnss)

        rec = d.nav("record")
        d.choose(rec.ids.unit, "101")
        # 1: an artifact plotted from a (simulated) total-station shot
        d.tap(rec.ids.cat_artifact)
        d.choose(rec.ids.form.inputs["material"], "obsidian")
        d.type(rec.ids.form.inputs["length_mm"], "31.5")
        d.tap(rec.ids.pos_shot)
        d.tap(rec.ids.take_shot)
        assert rec.ids.shot_line.text.startswith("BKS,1,"), rec.problem
        d.tap(rec.ids.save)
        assert rec.problem == "", rec.problem
        assert rec.checks.startswith("Saved find 1 in unit 101 at E "), rec.checks
        d.screenshot(shots, "record-saved")
        d.tap(rec.ids.new_find)
        # 2: a fossil by GNSS (RTK fixed from the simulated receiver)
        d.tap(rec.ids.cat_fossil)
        d.choose(rec.ids.form.inputs["material"], "tooth")
        d.type(rec.ids.form.inputs["taxon"], "Suidae")
        d.tap(rec.ids.pos_gnss)
        d.tap(rec.ids.take_gnss)
        d.tap(rec.ids.save)
        assert rec.problem == "" and rec.checks.startswith("Saved find 2"), (rec.problem, rec.checks)
        d.tap(rec.ids.new_find)
        # 3: a sieve find: spit and bucket, no point
        d.tap(rec.ids.cat_artifact)
        d.choose(rec.ids.form.inputs["material"], "chert")
        d.tap(rec.ids.pos_sieve)
        d.choose(rec.ids.spit, "1")
        d.type(rec.ids.bucket, "B-04")
        d.tap(rec.ids.save)
        assert rec.problem == "" and rec.checks.startswith("Saved find 3 in unit 101 (no point: sieve find)"), rec.checks

        finds = d.nav("finds")
        assert finds.count == "3 finds"
        d.screenshot(shots, "finds-three")
        labels = d.nav("labels")
        assert labels.waiting == "3 labels of this tablet's finds waiting: 1, 2, 3"
        d.tap(labels.ids.print_labels)
        d.until(lambda: not labels.busy, what="the label sheet")  # written off the UI thread
        assert labels.printed.startswith("Label sheet written: 3 labels on 1 page, in "), labels.problem
        d.type(labels.ids.first, "2")
        d.tap(labels.ids.reprint)  # a torn label: find 2 again, alone
        d.until(lambda: not labels.busy, what="the label sheet written again")
        assert labels.printed.startswith("Label sheet written again: 1 label on 1 page, in "), labels.problem
        d.screenshot(shots, "labels-printed")

        link = d.nav("link")
        d.tap(link.ids.sync)
        d.until(lambda: not link.busy, what="the sync of the day")
        assert link.problem == "", link.problem
        d.screenshot(shots, "camp-synced")

        mine = {f.id: f for f in d.app.store.list(Find)}
        theirs = {f.id: f for f in server.list(Find)}
        assert set(theirs) == set(mine) and len(mine) == 3
        assert sorted((f.number, f.recovery, f.position_source) for f in theirs.values()) == [
            (1, "plotted", "total_station"), (2, "plotted", "gnss"), (3, "sieved", "none")]
        assert all(f.label_printed_at is not None for f in theirs.values())
        assert theirs[next(i for i, f in mine.items() if f.number == 2)].taxon == "Suidae"
    server.close()
