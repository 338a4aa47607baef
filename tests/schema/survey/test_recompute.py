"""Raw shots are kept: correcting a setup recomputes every find and level point shot from it in one call."""

from __future__ import annotations

import datetime as dt

import pytest

from mobile.store import TabletStore
from schema.demo_site import DemoSite
from schema.errors import RecordInvalid
from schema.records import Find, LevelPoint, Shot, StationSetup
from schema.survey.recompute import shot_positions
from tests.helpers import find_data

WHEN = dt.datetime(2026, 7, 3, 8, 0, tzinfo=dt.timezone.utc)


def _setup(demo: DemoSite, **changes) -> StationSetup:  # type: ignore[no-untyped-def]
    cp = demo.control_points[0]
    data = dict(site_id=demo.site.id, method="occupied", occupied_point_id=cp.id, station_code=cp.code,
                e=cp.e, n=cp.n, z=cp.z, instrument_height_m=1.55, orientation=0.0, set_up_at=WHEN, recorder="AK")
    data.update(changes)
    return StationSetup(**data)


def test_correcting_the_orientation_moves_the_finds(tablet: TabletStore, demo_site: DemoSite) -> None:
    setup = tablet.add(_setup(demo_site))
    # a shot 10 m due north of CP1 with the wrong orientation (0); the true orientation is 90 (east)
    shot = tablet.add(Shot(setup_id=setup.id, hz=0.0, zenith=90.0, slope_distance_m=10.0, target_height_m=1.55, shot_at=WHEN))
    (pos,) = shot_positions(setup, [shot]).values()
    find = tablet.save_find(find=find_data(demo_site, shot_id=shot.id, e=pos[0], n=pos[1], z=pos[2]))
    level = tablet.add(LevelPoint(unit_id=demo_site.units["101"].id, surface="top", e=pos[0], n=pos[1], z=pos[2], shot_id=shot.id))
    moved = tablet.correct_setup(setup.model_copy(update={"orientation": 90.0}))
    assert moved == {"find": 1, "level_point": 1}
    cp = demo_site.control_points[0]
    got = tablet.get(Find, find.id)
    assert (got.e, got.n, got.z) == pytest.approx((cp.e + 10.0, cp.n, cp.z), abs=1e-9)
    assert tablet.get(LevelPoint, level.id).e == pytest.approx(cp.e + 10.0)
    assert tablet.get(StationSetup, setup.id).orientation == 90.0


def test_a_bad_correction_changes_nothing(tablet: TabletStore, demo_site: DemoSite) -> None:
    setup = tablet.add(_setup(demo_site))
    tablet.add(Shot(setup_id=setup.id, hz=0.0, zenith=90.0, slope_distance_m=10.0, target_height_m=1.55, shot_at=WHEN))
    with pytest.raises(RecordInvalid, match="orientation"):
        tablet.correct_setup(setup.model_copy(update={"orientation": 400.0}))
    assert tablet.get(StationSetup, setup.id).orientation == 0.0
