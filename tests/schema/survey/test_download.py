"""The day's download matched to finds, as pure functions: numbers, voided and duplicated finds, reduced points
kept as the instrument's own coordinates, the move bound."""

from __future__ import annotations

import math
import uuid
from dataclasses import dataclass

import pytest

from schema.errors import InputFileInvalid
from schema.survey.download import DownloadPoint, find_number, plan_attach, read_download_csv, reduced_note
from schema.survey.polar import Station

STATION = Station(100.0, 200.0, 50.0, 1.5, 0.0)


@dataclass
class F:  # the fields of a find that matching reads
    number: int
    e: float | None = None
    n: float | None = None
    z: float | None = None
    voided: bool = False
    recovery: str = "plotted"
    position_source: str = "none"
    shot_id: uuid.UUID | None = None
    id: uuid.UUID = None  # type: ignore[assignment]

    def __post_init__(self) -> None:
        self.id = uuid.uuid4()


@pytest.mark.parametrize(("point", "prefix", "number"), [
    ("1012", "", 1012), ("0001012", "", 1012), ("F-0002", "F-", 2), ("F-0002", "", None), ("LP-101-T1", "F-", None),
    ("0", "", None), ("12a", "", None),
])
def test_find_numbers_from_point_ids(point: str, prefix: str, number: int | None) -> None:
    assert find_number(point, prefix) == number


def test_matching_names_what_matched_nothing() -> None:
    # the 3-4-5 worked example of tests/schema/survey/test_polar.py: hz atan(3/4), level, 5 m -> (103, 204, 50)
    hz = math.degrees(math.atan2(3, 4))
    points = [DownloadPoint("7", 2, "7,...", "raw", hz, 90.0, 5.0, 1.5),
              DownloadPoint("8", 3, "8,...", "raw", hz, 90.0, 5.0, 1.5),
              DownloadPoint("9", 4, "9,...", "raw", hz, 90.0, 5.0, 1.5),
              DownloadPoint("10", 5, "10,...", "raw", hz, 90.0, 5.0, 1.5),
              DownloadPoint("CP2", 6, "CP2,...", "raw", hz, 90.0, 5.0, 1.5)]
    finds = [F(7), F(8, voided=True), F(9), F(9), F(11), F(12, recovery="sieved")]
    plan = plan_attach(points, finds, STATION)
    assert [(m.number, round(m.e, 9), round(m.n, 9), round(m.z, 9)) for m in plan.matches] == [(7, 103.0, 204.0, 50.0)]
    assert [(p.point, why) for p, why in plan.unmatched] == [
        ("8", "find 8 is voided"), ("9", "find number 9 is held by 2 finds; settle the duplicate first"),
        ("10", "no find 10"), ("CP2", "not a find number")]
    assert plan.finds_without_point == [9, 9, 11]


def test_reduced_points_keep_the_instruments_coordinates_exactly_and_moves_are_held() -> None:
    # the 3-4-5 worked example of tests/schema/survey/test_polar.py (test_345_triangle_level_shot): from a station
    # at (100, 200, 50), hz atan(3/4), level, 5 m gives (103, 204, 50). The instrument sends that point reduced;
    # a raw point of the same readings goes through the reduction.
    hz = math.degrees(math.atan2(3, 4))
    reduced = DownloadPoint("7", 2, "7,103,204,50", "reduced", target_height_m=1.3, e=103.0, n=204.0, z=50.0)
    raw = DownloadPoint("8", 3, "8,...", "raw", hz, 90.0, 5.0, 1.5)
    far, plain = F(7, 103.3, 204.0, 50.0, position_source="tape"), F(8)
    plan = plan_attach([reduced, raw], [far, plain], STATION, max_move_m=0.25)
    assert [m.number for m in plan.matches] == [8] and [m.number for m in plan.held] == [7]
    m = plan.held[0]
    assert m.move_m == pytest.approx(0.3, abs=1e-12)
    assert (m.e, m.n, m.z) == (103.0, 204.0, 50.0)  # exactly the instrument's, not a round trip through readings
    assert (m.hz, m.zenith, m.slope_distance_m) == (None, None, None)  # no readings are made up for it
    (r,) = plan.matches
    assert (r.e, r.n, r.z) == pytest.approx((103.0, 204.0, 50.0), abs=1e-9)
    assert (r.hz, r.zenith, r.slope_distance_m) == (hz, 90.0, 5.0)  # a raw point's shot keeps its readings
    assert plan_attach([reduced], [far], STATION, max_move_m=0.25, confirm_moves=True).matches[0].number == 7
    # attached before (the same coordinates from the instrument, no shot): the same, nothing to write
    near = F(7, 103.0, 204.0, 50.0, position_source="total_station")
    assert plan_attach([reduced], [near], STATION).matches[0].same
    # a find at the point by a shot of its own is not "the same": the instrument's reduction replaces the shot
    shot = F(7, 103.0, 204.0, 50.0, position_source="total_station", shot_id=uuid.uuid4())
    assert not plan_attach([reduced], [shot], STATION).matches[0].same
    note = reduced_note(reduced, "day.csv")
    assert note == "[position reduced by the instrument: point 7, line 2 of day.csv: 7,103,204,50]"
    # a raw point attached before with the same line: the same
    raw_again = F(8, r.e, r.n, r.z, position_source="total_station")
    assert plan_attach([raw], [raw_again], STATION, held_lines={raw_again.id: "8,..."}).matches[0].same


def test_csv_download_in_gon_with_named_columns() -> None:
    text = "Pt,HA,ZA,SD,TH\n7,40.9666,100,5,1.5\n"
    (p,) = read_download_csv(text, source="d.csv", setup_unit="deg", angle_unit="gon",
                             columns={"point": "Pt", "hz": "HA", "zenith": "ZA", "slope_distance": "SD",
                                      "target_height": "TH"})
    assert (p.point, p.kind, p.zenith, p.slope_distance_m, p.raw_line) == ("7", "raw", 90.0, 5.0, "7,40.9666,100,5,1.5")
    assert p.hz == pytest.approx(40.9666 * 0.9, abs=1e-12)
    with pytest.raises(InputFileInvalid, match="d.csv: no column hz \\('HA'\\) in the header \\(Pt, ZA\\)"):
        read_download_csv("Pt,ZA\n", source="d.csv", setup_unit="deg", columns={"hz": "HA", "point": "Pt"})
