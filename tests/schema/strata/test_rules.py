"""Find, horizon and quality rules on the invented demo site with planted mistakes."""

from __future__ import annotations

import datetime as dt
import uuid

import pytest

from schema.demo_site import DemoSite
from schema.records import Find, GnssFix, LevelPoint, Relation, StationSetup
from schema.strata import FindColumns, SiteData, validate
from tests.helpers import find_data

TZ = dt.timezone(dt.timedelta(hours=3))


def site_data(demo: DemoSite, finds: list[Find], **extra) -> SiteData:  # type: ignore[no-untyped-def]
    data = SiteData(
        site=demo.site, trenches=list(demo.trenches.values()), units=list(demo.units.values()),
        relations=list(demo.relations), horizons=list(demo.horizons.values()), level_points=list(demo.level_points),
        spits=[s for spits in demo.spits.values() for s in spits], finds=FindColumns.from_finds(finds),
    )
    for k, v in extra.items():
        setattr(data, k, getattr(data, k) + v)
    return data


def find(demo: DemoSite, **changes) -> Find:  # type: ignore[no-untyped-def]
    return Find.model_validate(find_data(demo, **changes))


def codes(report) -> list[str]:  # type: ignore[no-untyped-def]
    return sorted(i.code for i in report.issues)


def test_clean_finds_give_no_issues(demo_site: DemoSite) -> None:
    # unit 101 in TR1 runs from Z 100.00 down to 99.65
    finds = [find(demo_site, number=1, z=99.81), find(demo_site, number=2, e=1003.9, n=2002.9, z=99.66)]
    assert codes(validate(site_data(demo_site, finds))) == []


def test_find_logged_in_the_wrong_unit(demo_site: DemoSite) -> None:
    # Z 99.30 lies in unit 103 (99.45 - 99.05) but the find was logged in 101 (100.00 - 99.65)
    report = validate(site_data(demo_site, [find(demo_site, number=1432, z=99.30)]))
    (i,) = report.issues
    assert i.code == "POS_BELOW_UNIT" and i.severity == "error" and i.value == pytest.approx(-0.35)
    assert str(i) == ("find 1432: Z 99.300 is 0.350 m below the base of unit 101 at this point; "
                      "check the unit or the target height")


def test_within_tolerance_is_fine(demo_site: DemoSite) -> None:
    # 1.5 cm above the top of 101 is inside the site's 2 cm tolerance; 3 cm is not
    assert codes(validate(site_data(demo_site, [find(demo_site, z=100.015)]))) == []
    assert codes(validate(site_data(demo_site, [find(demo_site, z=100.03)]))) == ["POS_ABOVE_UNIT"]


def test_unit_assignment_rules(demo_site: DemoSite) -> None:
    tr2 = demo_site.trenches["TR2"].id
    finds = [
        find(demo_site, number=1, unit_id=demo_site.units["202"].id, trench_id=tr2, e=1011.0, n=2006.0, z=99.9),
        find(demo_site, number=2, unit_id=demo_site.units["201"].id),  # a TR2 unit on a TR1 find
        find(demo_site, number=3, found_at=dt.datetime(2026, 6, 20, 10, tzinfo=TZ)),  # before the unit opened
        find(demo_site, number=4, unit_id=uuid.UUID(int=7)),
    ]
    got = codes(validate(site_data(demo_site, finds)))
    assert "UNIT_IS_CUT" in got and "UNIT_OTHER_TRENCH" in got and "UNIT_NOT_OPEN" in got and "UNIT_UNKNOWN" in got


def test_dates_use_the_site_time_zone(demo_site: DemoSite) -> None:
    # 30 June 22:30 UTC is already 1 July in Nairobi (UTC+3), the day unit 101 opened
    late = dt.datetime(2026, 6, 30, 22, 30, tzinfo=dt.timezone.utc)
    demo_site.site = demo_site.site.model_copy(update={"timezone": "Africa/Nairobi"})
    assert codes(validate(site_data(demo_site, [find(demo_site, found_at=late)]))) == []
    demo_site.site = demo_site.site.model_copy(update={"timezone": "UTC"})
    assert codes(validate(site_data(demo_site, [find(demo_site, found_at=late)]))) == ["UNIT_NOT_OPEN"]


def test_outside_the_trench_and_far_away(demo_site: DemoSite) -> None:
    finds = [find(demo_site, number=1, e=1004.30, n=2001.0), find(demo_site, number=2, e=1200.0, n=2001.0),
             find(demo_site, number=3, e=1004.03, n=2001.0)]  # 3 cm over the edge: on the baulk, tolerated
    report = validate(site_data(demo_site, finds))
    assert [(i.code, i.label) for i in report.issues if i.code.startswith("POS_")] == [
        ("POS_FAR_OUTSIDE", "find 2"), ("POS_OUTSIDE_TRENCH", "find 1")]


def test_sieving_rules(demo_site: DemoSite) -> None:
    spit_101 = demo_site.spits["101"][0].id
    spit_102 = demo_site.spits["102"][0].id
    none = dict(e=None, n=None, z=None, position_source="none", recovery="sieved")
    finds = [find(demo_site, number=1, **none), find(demo_site, number=2, spit_id=spit_102, **none),
             find(demo_site, number=3, recovery="sieved", spit_id=spit_101), find(demo_site, number=4, spit_id=spit_101, **none)]
    assert codes(validate(site_data(demo_site, finds))) == ["SIEVE_HAS_POINT", "SIEVE_NO_SPIT", "SPIT_OTHER_UNIT"]


def test_duplicate_numbers_even_when_voided(demo_site: DemoSite) -> None:
    finds = [find(demo_site, number=5), find(demo_site, number=5, voided=True, void_reason="dup")]
    assert codes(validate(site_data(demo_site, finds))) == ["NUMBER_DUPLICATE"]


def test_duplicate_numbers_speak_in_units_and_times(demo_site: DemoSite) -> None:
    """Issue 18: the message tells the two finds apart by unit and time found (site's zone), not by id prefixes."""
    demo_site.site = demo_site.site.model_copy(update={"timezone": "Africa/Nairobi"})
    other = demo_site.units["102"]
    finds = [find(demo_site, number=5),
             find(demo_site, number=5, unit_id=other.id, voided=True, void_reason="dup",
                  found_at=dt.datetime(2026, 7, 4, 7, 5, tzinfo=dt.timezone.utc))]
    (dup,) = validate(site_data(demo_site, finds)).issues
    assert dup.message == ("find number 5 is used by 2 finds (in unit 101, found 2026-07-03 09:30; "
                           "in unit 102, found 2026-07-04 10:05, voided)")  # 07:05 UTC is 10:05 in Nairobi (UTC+3)


def test_horizon_order_against_the_matrix(demo_site: DemoSite) -> None:
    # put 101 (top of TR1) into the lowest horizon H4: it now lies above units of H2 and H3 in the matrix
    demo_site.units["101"] = demo_site.units["101"].model_copy(update={"horizon_id": demo_site.horizons["H4"].id})
    report = validate(site_data(demo_site, [find(demo_site)]))
    orders = [i for i in report.issues if i.code == "HORIZON_ORDER"]
    assert orders and orders[0].message.startswith("unit 101 lies above unit ")
    assert "HORIZON_SAME_AS_SPLIT" not in codes(report)


def test_unit_with_finds_but_no_horizon(demo_site: DemoSite) -> None:
    demo_site.units["101"] = demo_site.units["101"].model_copy(update={"horizon_id": None})
    report = validate(site_data(demo_site, [find(demo_site)]))
    assert "HORIZON_MISSING" in codes(report)


def test_missing_surface_and_unknown_level_point_unit(demo_site: DemoSite) -> None:
    unit = demo_site.units["101"].id
    demo_site.level_points = [lp for lp in demo_site.level_points if not (lp.unit_id == unit and lp.surface == "bottom")]
    stray = LevelPoint(unit_id=uuid.UUID(int=5), surface="top", e=1000.0, n=2000.0, z=100.0)
    report = validate(site_data(demo_site, [find(demo_site)], level_points=[stray]))
    assert codes(report) == ["LEVEL_UNKNOWN_UNIT", "SURFACE_MISSING"]
    (lost,) = [i for i in report.issues if i.code == "LEVEL_UNKNOWN_UNIT"]
    assert (lost.label, lost.message) == ("top level at E 1000.000 N 2000.000", "a top level point at E 1000.000 N "
                                          "2000.000 Z 100.000 names a unit that is not recorded at this site")


def test_gnss_float_and_setup_residual(demo_site: DemoSite) -> None:
    at = dt.datetime(2026, 7, 3, tzinfo=dt.timezone.utc)
    fix = GnssFix(site_id=demo_site.site.id, raw_sentences=["$GNGGA..."], lat=-2.5, lon=35.7, fix_quality=5,
                  fixed_at=at, plot_override_reason="canopy")
    setup = StationSetup(site_id=demo_site.site.id, method="resection", station_code="FS1", e=1.0, n=2.0, z=3.0,
                         instrument_height_m=1.5, orientation=10.0, set_up_at=at, recorder="MO",
                         residuals=[{"point": "CP1", "d": 0.004}, {"point": "CP2", "d": 0.023}])
    report = validate(site_data(demo_site, [find(demo_site, position_source="gnss", gnss_fix_id=fix.id)],
                                gnss_fixes=[fix], setups=[setup]))
    assert codes(report) == ["GNSS_NOT_FIXED", "SETUP_RESIDUAL"]
    assert "accepted by the recorder: canopy" in report.issues[0].message


def test_relation_to_itself_is_refused_at_input_but_unknown_units_are_issues(demo_site: DemoSite) -> None:
    ghost = Relation(site_id=demo_site.site.id, upper_unit_id=demo_site.units["101"].id, lower_unit_id=uuid.UUID(int=3),
                     kind="above")
    assert codes(validate(site_data(demo_site, [], relations=[ghost]))) == ["MATRIX_UNKNOWN_UNIT"]
