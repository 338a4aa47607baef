"""Day's "Attach the instrument's download" in a real window (issue 21): the file is chosen in the file chooser by
touch, checked (matched, held, unmatched, finds without a point), refused while a move is unconfirmed, then
attached; the finds' positions and shots are in the tablet file and their checks ran."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.ui.test_tablet_windows import _set_up_instrument, _start_day

pytestmark = pytest.mark.ui

NONE = dict(e=None, n=None, z=None, position_source="none", position_sigma_m=None)


def test_attach_a_download_on_the_day_screen(tablet, demo_site, run_app, shots, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    from schema.records import Find, Shot
    from schema.survey.recompute import station_of
    from schema.survey.simulate import readings_for
    from tests.helpers import find_data

    tablet.save_find(find=find_data(demo_site, number=1))  # plotted at (1001.25, 2001.5, 99.81)
    for n in (2, 3):
        tablet.save_find(find=find_data(demo_site, number=n, **NONE))
    d = run_app(tablet.path, simulate=True)
    day = d.screen("day")
    d.tap(day.ids.attach_download)
    assert "the day has not been started" in day.problem, day.problem  # a download needs the day's setup
    _start_day(d)
    _set_up_instrument(d)

    station = station_of(d.app.days.require_setup())
    rows = ["point,hz,zenith,slope_distance,target_height"]
    for point, (e, n, z) in (("2", (1002.5, 2001.0, 99.7)), ("1", (1001.25, 2001.8, 99.81)),
                             ("77", (1002.0, 2002.0, 99.7))):
        hz, zen, sd = (float(x[0]) for x in readings_for(station, e, n, z, 1.3))
        rows.append(f"{point},{hz:.6f},{zen:.6f},{sd:.5f},1.300")
    folder = tmp_path / "downloads"
    folder.mkdir()
    (folder / "day.csv").write_text("\n".join(rows) + "\n")

    d.tap(day.ids.attach_download)
    dialog = day.dialog
    dialog.chooser.path = str(folder)
    d.until(lambda: any(getattr(w, "text", "") == "day.csv" for w in dialog.chooser.walk()), timeout_s=10,
            what="the chooser to list day.csv")
    entry = next(w for w in dialog.chooser.walk() if getattr(w, "text", "") == "day.csv")
    d.tap(entry)
    assert dialog.path.text == str(folder / "day.csv")
    d.type(dialog.target, "1,3 m")  # not a number: refused in the screens' words (the field by its label)
    d.tap(dialog.check_button)
    assert dialog.problem.text == ("PROBLEM: download refused, nothing was saved. Target height: '1.3 m' is not a pole "
                                   "height. Fix: type it in metres, e.g. 1.300, or leave it empty"), dialog.problem.text
    d.type(dialog.target, "")
    d.tap(dialog.check_button)
    assert dialog.problem.text == "", dialog.problem.text
    lines = dialog.summary.text.splitlines()
    assert lines[:3] == ["day.csv through today's setup at CP1:", "Matched: 1",
                         "  point 2 -> find 2: E 1002.500 N 2001.000 Z 99.700 (raw; no position before)"]
    assert lines[3:] == ["MOVES MORE THAN 0.1 m, written only if you tick 'Move them': 1",
                         "  point 1 -> find 1: E 1001.250 N 2001.800 Z 99.810 (raw; moves 0.300 m)",
                         "Points matching no find of this tablet: 1", "  line 4 point 77: no find 77",
                         "Plotted finds without a point: 3"]
    d.screenshot(shots, "day-attach-check")
    d.tap(dialog.attach_button)  # the move is not confirmed: nothing written
    assert dialog.problem.text.startswith("PROBLEM: 1 point would move its find further than 0.1 m: find 1 by "
                                          "0.300 m (point 1); nothing was written")
    assert {f.number: f.shot_id for f in d.app.store.list(Find)}[2] is None
    d.tap(dialog.move)
    d.tap(dialog.attach_button)
    d.pump(5)
    assert dialog.parent is None  # closed
    assert day.download_state == "Attached 2 points to finds 2, 1.", day.download_state
    finds = {f.number: f for f in d.app.store.list(Find)}
    assert (finds[2].e, finds[2].n, finds[2].z) == pytest.approx((1002.5, 2001.0, 99.7), abs=1e-4)  # file digits
    assert finds[1].n == pytest.approx(2001.8, abs=1e-4)
    assert d.app.store.get(Shot, finds[2].shot_id).raw_line == rows[1]
    assert d.app.finds.open_checks(finds[2].id) == []  # checked again: inside TR1, within unit 101
    d.screenshot(shots, "day-attach-done")
