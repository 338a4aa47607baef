"""On a real window, by touches (issue 18): the human-remains STOP dialog drawn in the sun theme records only
the steps the recorder ticked; an error is scrolled into sight (Accept setup with no initials); every screen is
captured in portrait and in landscape."""

from __future__ import annotations

from typing import Any

import pytest

from schema.records import SafetyCheck

pytestmark = pytest.mark.ui


def _on_screen(d: Any, widget: Any) -> bool:
    x0, y0 = widget.to_window(widget.x, widget.y)
    x1, y1 = widget.to_window(widget.right, widget.top)
    return 0 <= x0 and 0 <= y0 and x1 <= d.window.width and y1 <= d.window.height


def test_stop_dialog_errors_in_sight_and_every_screen_both_ways(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    from tests.ui.test_tablet_windows import _start_day

    d = run_app(tablet.path, simulate=True)
    _start_day(d)
    day = d.screen("day")
    assert day.heat_state == "HEAT: not acknowledged yet today."
    d.tap(day.ids.heat_ack)  # the recorder's initials are filled in; the acknowledgement is recorded
    (heat,) = d.app.store.list(SafetyCheck, kind="heat")
    assert heat.answer == "heat caution read at day start; acknowledged by AK"
    assert day.heat_state.startswith("Heat caution acknowledged at "), day.heat_state
    d.choose(day.ids.station, "CP1")
    d.choose(day.ids.bs1_point, "CP2")
    d.tap(day.ids.bs1_read)
    d.choose(day.ids.bs2_point, "CP3")
    d.tap(day.ids.bs2_read)
    d.tap(day.ids.compute)
    d.tap(day.ids.accept)  # no initials for the laser caution: the error must be where the eye is
    assert day.problem.startswith("PROBLEM: setup refused, nothing was saved. Laser:"), day.problem
    d.pump(5)
    shown = next(w for w in day.walk() if getattr(w, "text", None) == day.problem)
    assert _on_screen(d, shown), "the error is off screen"
    d.screenshot(shots, "day-error-in-sight")
    d.type(day.ids.laser_by, "AK")
    d.tap(day.ids.accept)
    assert day.setup_state.startswith("Setup accepted"), day.problem

    rec = d.nav("record")
    d.choose(rec.ids.unit, "101")
    d.tap(rec.ids.cat_fossil)
    d.choose(rec.ids.form.inputs["material"], "bone")
    d.tap(rec.ids.human_remains)
    dialog = rec.dialog
    d.pump(5)
    d.screenshot(shots, "caution-human-remains")
    d.tap(dialog.steps["work stopped at the spot"])  # the spot is not yet secured: that box stays empty
    d.type(dialog.answer, "site director JT by radio, 10:40")
    d.tap(dialog.record_button)
    assert rec.human_remains
    d.tap(rec.ids.take_shot)
    d.tap(rec.ids.save)
    assert rec.problem == "", rec.problem
    (check,) = d.app.store.list(SafetyCheck, kind="human_remains")
    assert (check.answer, check.notified) == ("work stopped at the spot", "site director JT, 10:40".replace(
        "JT, 10:40", "JT by radio, 10:40"))

    # Finds: the chosen row is highlighted; a filter that hides it drops the choice (Void acts on nothing hidden)
    finds = d.nav("finds")
    d.pump(3)
    (row,) = [w for w in finds.ids.rv.layout_manager.children if w.find_id]
    d.tap(row)
    assert finds.chosen == row.find_id and row.selected and not finds.ids.void.disabled
    d.screenshot(shots, "finds-selected")
    d.choose(finds.ids.category, "artifact")
    assert finds.chosen == "" and finds.ids.void.disabled and finds.count == "0 finds"
    d.choose(finds.ids.category, "any category")
    rec = d.nav("record")
    # the method row stays put when the method changes (a gloved second tap lands where the first did)
    where = []
    for mode in ("shot", "gnss", "tape", "sieve", "shot"):
        d.tap(rec.ids[f"pos_{mode}"])
        d.pump(3)
        where.append(tuple(round(v) for v in rec.ids.pos_gnss.to_window(*rec.ids.pos_gnss.pos)))
    assert len(set(where)) == 1, where
    for name in ("day", "record", "units", "finds", "labels", "link"):
        screen = d.nav(name)
        d.screenshot(shots, f"{name}-portrait")
        if name in ("labels", "link"):  # a short page starts under the bar, not half a screen down
            title = next(w for w in screen.walk() if type(w).__name__ == "Title")
            assert d.window.height - title.to_window(title.x, title.top)[1] < 120, name
    from PIL import Image

    d.window.size = (1280, 800)
    d.pump(10)
    try:
        for name in ("day", "record", "units", "finds", "labels", "link"):
            screen = d.nav(name)
            d.pump(5)
            # the offscreen EGL surface keeps its first size: drawn through an Fbo of the root widget
            d.app.root.export_to_png(str(shots / f"{name}-landscape.png"))
            with Image.open(shots / f"{name}-landscape.png") as img:
                assert img.size == (1280, 800)
            if name == "record":
                assert _on_screen(d, screen.ids.save) and _on_screen(d, screen.ids.new_find)
    finally:
        d.window.size = (800, 1280)
        d.pump(5)
