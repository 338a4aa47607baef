"""The day's download attached on the tablet (issue 21), with no window: points matched to this tablet's finds by
number through today's accepted setup, reviewed, moves held until confirmed, then written through the tablet's
save path (versions, live checks). The window test is tests/ui/test_attach_window.py."""

from __future__ import annotations

import math
import uuid
from pathlib import Path
from typing import Any

import pytest

from mobile.controllers import FindController
from mobile.controllers.attach import AttachController
from schema.errors import InputFileInvalid, MoveNotConfirmed, RecordInvalid
from schema.records import Find, Shot
from schema.survey.simulate import readings_for
from tests.helpers import find_data, start_field_day

NONE = dict(e=None, n=None, z=None, position_source="none", position_sigma_m=None)


def _day(tablet: Any, demo: Any) -> tuple[AttachController, Any]:
    days, truth = start_field_day(tablet, demo)
    finds = FindController(tablet, days)
    tablet.save_find(find=find_data(demo, number=1))  # plotted at (1001.25, 2001.5, 99.81)
    for n in (2, 3, 4):
        tablet.save_find(find=find_data(demo, number=n, **NONE))
    tablet.put(Find(**find_data(demo, number=150, device_id=uuid.uuid4(), **NONE)))  # another tablet's, by sync
    return AttachController(finds), truth


def _raw_row(truth: Any, point: str, e: float, n: float, z: float, th: float = 1.3) -> str:
    hz, zen, sd = (float(x[0]) for x in readings_for(truth, e, n, z, th))
    return f"{point},{hz:.6f},{zen:.6f},{sd:.5f},{th}"


def test_a_download_is_reviewed_then_written_as_shots_and_reduced_positions(tablet, demo_site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    attach, truth = _day(tablet, demo_site)
    # the 3-4-5 worked example of tests/schema/survey/test_polar.py (test_345_triangle_level_shot) from the day's
    # station (CP1): 3 m east and 4 m north, level, 5 m away on bearing atan(3/4); the reading is that bearing less
    # the accepted setup's orientation, and a target as high as the instrument leaves Z at the station's mark
    setup = attach.days.require_setup()
    hz = (math.degrees(math.atan2(3, 4)) - setup.orientation) % 360
    raw = tmp_path / "day.csv"
    rows = ["id,hz,zenith,slope_distance,target_height",
            f"2,{hz!r},90,5,{setup.instrument_height_m!r}",
            _raw_row(truth, "0003", 1002.5, 2001.0, 99.70),
            _raw_row(truth, "1", 1001.25, 2001.9, 99.81),  # 0.4 m from where find 1 was: held
            _raw_row(truth, "150", 1002.0, 2002.0, 99.7),  # another tablet's find
            _raw_row(truth, "99", 1002.0, 2002.0, 99.7),
            _raw_row(truth, "LP-T1", 1002.0, 2002.0, 99.9)]
    raw.write_text("\n".join(rows) + "\n")
    review = attach.review(raw)
    assert review.lines[0] == "day.csv through today's setup at CP1:"
    assert review.lines[1:3] == ["Matched: 2", "  point 2 -> find 2: E 998.000 N 1994.000 Z 100.512 (raw; no position "
                                 "before)"]
    assert review.lines[4:] == [
        "MOVES MORE THAN 0.1 m, written only if you tick 'Move them': 1",
        "  point 1 -> find 1: E 1001.250 N 2001.900 Z 99.810 (raw; moves 0.400 m)",
        "Points matching no find of this tablet: 3",
        "  line 5 point 150: find 150 is another tablet's; attach it there or at camp",
        "  line 6 point 99: no find 99",
        "  line 7 point LP-T1: not a find number",
        "Plotted finds without a point: 4",
    ]
    with pytest.raises(MoveNotConfirmed, match=r"^1 point would move its find further than 0.1 m: find 1 by 0.400 m "
                                               r"\(point 1\); nothing was written"):
        attach.attach(review)
    assert {f.number: f.shot_id for f in tablet.list(Find)}[2] is None
    import dataclasses

    from schema.errors import SetupNotReady

    with pytest.raises(SetupNotReady, match="the instrument setup changed since the download was checked"):
        attach.attach(dataclasses.replace(review, setup_id=uuid.uuid4()), confirm_moves=True)

    saved = {s.find.number: s for s in attach.attach(review, confirm_moves=True)}
    assert sorted(saved) == [1, 2, 3]
    two = tablet.get(Find, saved[2].find.id)
    # the worked example's answer: (CP1.e + 3, CP1.n + 4, CP1.z)
    assert (two.e, two.n, two.z) == pytest.approx((995.0 + 3, 1990.0 + 4, 100.512), abs=1e-9)
    shot = tablet.get(Shot, two.shot_id)
    assert shot.raw_line == rows[1] and shot.setup_id == attach.days.day.setup.id  # the line kept as received
    assert (two.position_source, saved[2].written) == ("total_station", ["E - -> 998.000", "N - -> 1994.000",
                                                                         "Z - -> 100.512", "position source none -> "
                                                                         "total station", "position sigma m - -> 0.005"])
    codes = {i.code for i in saved[2].issues}
    assert {"POS_ABOVE_UNIT"} <= codes and codes & {"POS_OUTSIDE_TRENCH", "POS_FAR_OUTSIDE"}, codes  # checks ran
    assert not [i for i in saved[3].issues if i.severity == "error"]  # inside the trench, in the unit
    assert (saved[3].find.e, saved[3].find.n) == pytest.approx((1002.5, 2001.0), abs=0.001)  # setup vs truth
    assert saved[1].find.n == pytest.approx(2001.9, abs=0.001)
    # written as this tablet's versions, so they sync like any edit
    import sqlalchemy as sa

    from schema.sync.tables import field_version

    with tablet.read() as conn:
        fv = field_version.c
        devices = set(conn.execute(sa.select(fv.device).where(fv.record_id == two.id, fv.field == "shot_id")).scalars())
    assert devices == {tablet.device_id()}

    again = attach.review(raw)
    assert "Already attached: find 2, find 3, find 1" in again.lines and again.to_write == []


def test_reduced_points_give_the_instruments_coordinates_exactly(tablet, demo_site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    attach, truth = _day(tablet, demo_site)
    # the same worked example, as the instrument reduces it itself: E, N, Z = (CP1.e + 3, CP1.n + 4, CP1.z)
    coords = tmp_path / "coords.txt"
    coords.write_text("PtID;East;North;Height\n".replace(";", ",") + "F-2,998.0,1994.0,100.512\nF-4,1002.125,2001.5,99.7\n")
    review = attach.review(coords, columns="point=PtID, e=East, n=North, z=Height", prefix="F-")
    assert review.lines[1:4] == [
        "Matched: 2",
        "  point F-2 -> find 2: E 998.000 N 1994.000 Z 100.512 (reduced by the instrument; no position before)",
        "  point F-4 -> find 4: E 1002.125 N 2001.500 Z 99.700 (reduced by the instrument; no position before)"]
    assert review.lines[-1] == "Plotted finds without a point: 3"
    saved = attach.attach(review)
    by = {s.find.number: tablet.get(Find, s.find.id) for s in saved}
    assert (by[2].e, by[2].n, by[2].z, by[2].shot_id) == (998.0, 1994.0, 100.512, None)  # exactly, no shot
    assert (by[4].e, by[4].n, by[4].z) == (1002.125, 2001.5, 99.7)
    assert by[4].notes == "[position reduced by the instrument: point F-4, line 3 of coords.txt: F-4,1002.125,2001.5,99.7]"
    assert attach.review(coords, columns="point=PtID, e=East, n=North, z=Height", prefix="F-").to_write == []


def test_lines_in_the_tablets_template_and_what_is_refused(tablet, demo_site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    from mobile.instruments import ShotSimulator
    from schema.survey import templates as tp

    attach, truth = _day(tablet, demo_site)
    t = tp.load_template(Path(__file__).resolve().parents[2] / "examples" / "instruments" / "delimited.toml")
    sim = ShotSimulator(truth, template=t)
    lines = tmp_path / "day.txt"
    lines.write_text(sim.shot_line(1002.5, 2001.0, 99.7, point="3") + "\n")
    (m,) = attach.review(lines, lines_template=t).to_write
    assert (m.number, m.e, m.n, m.z) == pytest.approx((3, 1002.5, 2001.0, 99.7), abs=0.001)  # DDD.MMSS to 0.1"
    with pytest.raises(InputFileInvalid, match="day.txt: no point column"):
        attach.review(lines)  # read as a CSV with a header, which it is not
    with pytest.raises(InputFileInvalid, match="nothing.csv: no such file; choose the download again"):
        attach.review(tmp_path / "nothing.csv")
    with pytest.raises(RecordInvalid, match="target height"):
        attach.review(lines, target_height_m="tall")
    with pytest.raises(RecordInvalid, match="'point' is not WHAT=HEADER"):
        attach.review(lines, columns="point")


def test_the_move_limit_is_the_tablets_setting(tablet, demo_site, tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from mobile.settings import TabletSettings

    attach, truth = _day(tablet, demo_site)
    raw = tmp_path / "day.csv"
    raw.write_text("id,hz,zenith,slope_distance,target_height\n" + _raw_row(truth, "1", 1001.25, 2001.9, 99.81) + "\n")
    assert [m.number for m in attach.review(raw).plan.held] == [1]  # 0.4 m past the 0.1 m default
    monkeypatch.setenv("BAULK_TABLET_DOWNLOAD_MAX_MOVE_M", "0.5")
    wider = AttachController(attach.finds, max_move_m=TabletSettings().download_max_move_m)
    review = wider.review(raw)
    assert (review.plan.held, [m.number for m in review.plan.matches]) == ([], [1])
    assert review.lines[2].endswith("(raw; moves 0.400 m)")
