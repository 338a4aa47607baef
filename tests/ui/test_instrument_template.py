"""The Day screen with an instrument line template (issue 21), in a real window: the simulated total station
sends the template's lines, the setup is computed from them, and the screen shows the active template and the
last line read, raw and decoded; a line the template cannot read is shown beside the reason."""

from __future__ import annotations

from pathlib import Path

import pytest

pytestmark = pytest.mark.ui

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "instruments"


def test_day_screen_shows_the_template_and_the_last_line(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    from schema.survey.templates import load_template

    template = load_template(EXAMPLES / "delimited.toml")
    d = run_app(tablet.path, simulate=True, template=template)
    day = d.nav("day")
    assert day.instrument_line.splitlines() == [
        f"Instrument template: semicolon-dms (delimited, {EXAMPLES / 'delimited.toml'})",
        "No line read from the instrument yet.",
    ]
    d.choose(day.ids.trench, "TR1")
    d.type(day.ids.recorder, "AK")
    d.tap(day.ids.start)
    d.choose(day.ids.station, "CP1")
    d.choose(day.ids.bs1_point, "CP2")
    d.tap(day.ids.bs1_read)
    d.choose(day.ids.bs2_point, "CP3")
    d.tap(day.ids.bs2_read)
    line = day.ids.bs2_line.text
    assert ";" in line and "*" in line and not line.startswith("BKS")  # the template's own line
    head, last, read = day.instrument_line.splitlines()
    assert last == f"Last line: {line}"
    assert read.startswith("Read as: point CP3, hz ") and read.endswith("target height 1.500 m, prism constant 0 mm")
    d.tap(day.ids.compute)
    assert day.problem == "", day.problem
    # the simulated station's orientation is recovered through DDD.MMSS readings (0.1" steps)
    assert day.residuals.startswith("Residuals:\nCP2: angle ")
    d.screenshot(shots, "day-template")
    d.type(day.ids.laser_by, "AK")
    d.tap(day.ids.accept)
    assert day.setup_state.startswith("Setup accepted: station CP1"), day.problem
    # a find plotted from the template's line: its raw shot keeps that line
    rec = d.nav("record")
    d.choose(rec.ids.unit, "101")
    d.tap(rec.ids.cat_artifact)
    d.choose(rec.ids.form.inputs["material"], "obsidian")
    d.tap(rec.ids.pos_shot)
    d.tap(rec.ids.take_shot)
    shot_line = rec.ids.shot_line.text
    assert shot_line.count(";") == 5 and "*" in shot_line, rec.problem
    d.tap(rec.ids.save)
    assert rec.problem == "" and rec.checks.startswith("Saved find 1 in unit 101 at E "), (rec.problem, rec.checks)
    from schema.records import Find, Shot

    (find,) = d.app.store.list(Find)
    assert d.app.store.get(Shot, find.shot_id).raw_line == shot_line
    day = d.nav("day")
    assert day.instrument_line.splitlines()[1] == f"Last line: {shot_line}"
    # a line that does not fit the template: refused, named, and shown raw
    d.app.shot_feed.last_raw = None
    with pytest.raises(Exception, match="semicolon-dms: the line 'BKS,1,45"):
        d.app.shot_feed.take(["BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*28"])
    day.refresh()
    d.pump(3)
    assert day.instrument_line.splitlines()[1:] == [
        "Last line: BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*28",
        "NOT READ: semicolon-dms: the line 'BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*28' has a wrong checksum "
        f"('28', expected {sum(b'BKS,1,45.0000,90.0000,5.0000,1.500,0,deg') % 256:02X}); the line was garbled on "
        "the way: take the shot again",
    ]
    d.screenshot(shots, "day-template-refused")
    # the tablet file remembers the template: the next start without --template reads with it
    from mobile.controllers import DayController

    assert DayController(tablet).template == template
