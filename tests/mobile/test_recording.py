"""Recording with instruments on the tablet: the raw observation and the find are saved together."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from mobile.recording import Reading, record_gnss_find, record_plotted_find, setup_by_backsight, setup_by_resection
from mobile.store import TabletStore
from schema.demo_site import DemoSite
from schema.errors import FixNotAccepted, RecordInvalid, ResectionRejected
from schema.records import Find, GnssFix, GridTransform, Shot, StationSetup
from schema.survey.crs import projected_to_lonlat
from schema.survey.grid import grid_to_crs
from schema.survey.polar import Station
from schema.survey.simulate import gga, gst, readings_for
from tests.helpers import find_data

AT = dt.datetime(2026, 7, 3, 7, 0, tzinfo=dt.timezone.utc)


def _reading(station: Station, e: float, n: float, z: float, th: float = 1.3) -> Reading:
    hz, zen, sd = readings_for(station, e, n, z, th)
    return Reading(float(hz[0]), float(zen[0]), float(sd[0]), th, AT)


def _occupied(tablet: TabletStore, demo: DemoSite) -> StationSetup:
    cp1, cp2, cp3 = demo.control_points
    truth = Station(cp1.e, cp1.n, cp1.z, 1.5, 42.0)
    setup, result = setup_by_backsight(
        tablet, site=demo.site, station=cp1, instrument_height_m=1.5, angle_unit="deg", recorder="AK", at=AT,
        backsights=[(cp2, _reading(truth, cp2.e, cp2.n, cp2.z)), (cp3, _reading(truth, cp3.e, cp3.n, cp3.z))],
    )
    assert result.orientation == pytest.approx(42.0, abs=1e-9)
    return setup


def test_backsight_setup_is_stored_with_residuals(tablet: TabletStore, demo_site: DemoSite) -> None:
    setup = _occupied(tablet, demo_site)
    stored = tablet.get(StationSetup, setup.id)
    assert stored.method == "occupied" and [r["point"] for r in stored.residuals] == ["CP2", "CP3"]


def test_plotted_find_keeps_its_shot(tablet: TabletStore, demo_site: DemoSite) -> None:
    setup = _occupied(tablet, demo_site)
    target = (1001.25, 2001.5, 99.81)
    find = record_plotted_find(tablet, setup=setup, reading=_reading(Station(setup.e, setup.n, setup.z, 1.5, 42.0), *target),
                               find=find_data(demo_site, e=None, n=None, z=None, position_source="none"))
    assert (find.e, find.n, find.z) == pytest.approx(target, abs=1e-9)
    shot = tablet.get(Shot, find.shot_id)
    assert shot.setup_id == setup.id and find.position_source == "total_station"


def test_failed_find_leaves_no_orphan_shot(tablet: TabletStore, demo_site: DemoSite) -> None:
    setup = _occupied(tablet, demo_site)
    with pytest.raises(RecordInvalid, match="material"):
        record_plotted_find(tablet, setup=setup, reading=_reading(Station(setup.e, setup.n, setup.z, 1.5, 42.0), 1001, 2001, 99.8),
                            find=find_data(demo_site, material="tooth", e=None, n=None, z=None, position_source="none"))
    assert tablet.count(Shot) == 0 and tablet.count(Find) == 0


def test_free_station_refused_over_tolerance_stores_nothing(tablet: TabletStore, demo_site: DemoSite) -> None:
    cps = demo_site.control_points
    truth = Station(1016.0, 2011.5, 100.4, 1.5, 131.7)
    obs = [(cp, _reading(truth, cp.e, cp.n + (0.05 if cp.code == "CP3" else 0.0), cp.z)) for cp in cps]
    with pytest.raises(ResectionRejected):
        setup_by_resection(tablet, site=demo_site.site, code="FS1", observations=obs, instrument_height_m=1.5,
                           angle_unit="deg", tolerance_m=0.01, recorder="MO", at=AT)
    assert tablet.count(StationSetup) == 0


GRID = GridTransform(a=0.99996 * np.cos(np.radians(-8.2)), b=0.99996 * np.sin(np.radians(-8.2)), tx=801234.5, ty=9712345.6)


def _site_with_grid(tablet: TabletStore, demo: DemoSite):  # type: ignore[no-untyped-def]
    site = demo.site.model_copy(update={"grid": GRID, "vertical_offset_m": -1187.42})
    return tablet.put(site)


def _sentences(e: float, n: float, z: float, quality: int) -> list[str]:
    lon, lat = projected_to_lonlat(*grid_to_crs(GRID, [e], [n]), 32736)
    return [gga(AT, float(lat[0]), float(lon[0]), quality=quality, height_m=z + 1187.42, geoid_sep_m=-12.3),
            gst(AT, sigma_lat=0.008, sigma_lon=0.007, sigma_alt=0.015)]


def test_rtk_fixed_gnss_find(tablet: TabletStore, demo_site: DemoSite) -> None:
    site = _site_with_grid(tablet, demo_site)
    find = record_gnss_find(tablet, site=site, sentences=_sentences(1021.0, 1997.0, 99.6, 4),
                            find=find_data(demo_site, e=None, n=None, z=None, position_source="none"))
    # NMEA carries 7 decimals of a minute here (about 0.2 mm); heights to the millimetre
    assert (find.e, find.n) == pytest.approx((1021.0, 1997.0), abs=0.001)
    assert find.z == pytest.approx(99.6, abs=0.001)
    assert find.position_sigma_m == 0.008
    fix = tablet.get(GnssFix, find.gnss_fix_id)
    assert fix.fix_quality == 4 and fix.plot_override_reason is None and len(fix.raw_sentences) == 2


def test_rtk_float_needs_an_override_which_is_recorded(tablet: TabletStore, demo_site: DemoSite) -> None:
    site = _site_with_grid(tablet, demo_site)
    data = find_data(demo_site, e=None, n=None, z=None, position_source="none")
    with pytest.raises(FixNotAccepted, match=r"fix quality 5 \(RTK float\) is not RTK fixed"):
        record_gnss_find(tablet, site=site, sentences=_sentences(1021.0, 1997.0, 99.6, 5), find=data)
    assert tablet.count(GnssFix) == 0
    find = record_gnss_find(tablet, site=site, sentences=_sentences(1021.0, 1997.0, 99.6, 5), find=data,
                            override_reason="canopy")
    assert tablet.get(GnssFix, find.gnss_fix_id).plot_override_reason == "canopy"


def test_gnss_without_a_site_grid_says_who_fits_it(tablet: TabletStore, demo_site: DemoSite) -> None:
    with pytest.raises(FixNotAccepted, match="the data manager fits it from the control points"):
        record_gnss_find(tablet, site=demo_site.site, sentences=_sentences(1021.0, 1997.0, 99.6, 4),
                         find=find_data(demo_site, e=None, n=None, z=None, position_source="none"))
