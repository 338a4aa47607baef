"""Backsight orientation and free-station resection."""

from __future__ import annotations

import math
import random

import pytest

from schema.errors import ObservationInvalid, ResectionRejected, WeakGeometry
from schema.survey.setup import Backsight, ControlObservation, KnownPoint, orient_by_backsights, resect

STATION = KnownPoint("STN", 100.0, 100.0, 50.0)


def test_one_backsight_due_north() -> None:
    # the point is due north (bearing 0); the circle reads 10 deg on it, so the zero reading points at 350 deg
    o = orient_by_backsights(STATION, [Backsight(KnownPoint("CP1", 100.0, 200.0), hz=10.0)])
    assert o.orientation == pytest.approx(350.0)
    assert o.warnings == ["one backsight only: the orientation has no check; shoot a second point"]


def test_backsights_average_across_zero() -> None:
    # two backsights whose own orientations are 359.99 and 0.01 deg: the circular mean is 0, not 180
    bs = [
        Backsight(KnownPoint("CP1", 100.0, 200.0), hz=0.01),          # bearing 0   -> 359.99
        Backsight(KnownPoint("CP2", 200.0, 100.0), hz=89.99),         # bearing 90  -> 0.01
    ]
    o = orient_by_backsights(STATION, bs)
    assert min(o.orientation, 360 - o.orientation) == pytest.approx(0.0, abs=1e-9)
    assert [round(b.angle_residual, 6) for b in o.backsights] == [-0.01, 0.01]
    assert o.warnings == []


def test_backsight_distance_residual_in_gon() -> None:
    bs = Backsight(KnownPoint("CP1", 100.0, 200.0), hz=0.0, zenith=100.0, slope_distance=100.004)
    o = orient_by_backsights(STATION, [bs], angle_unit="gon")
    assert o.backsights[0].distance_residual_m == pytest.approx(0.004, abs=1e-9)


def test_missing_backsight_is_refused() -> None:
    with pytest.raises(ObservationInvalid) as exc:
        orient_by_backsights(STATION, [])
    assert str(exc.value) == "station STN: no backsight given; shoot at least one known control point to orient"


def _observe(station: KnownPoint, orientation_deg: float, ih: float, points: list[KnownPoint], *, th: float = 1.5,
             noise: float = 0.0, rng: random.Random | None = None) -> list[ControlObservation]:
    """Exact (or noisy) readings from a known station to known points: the inverse of the reduction."""
    out = []
    for p in points:
        de, dn = p.e - station.e, p.n - station.n
        if rng is not None and noise:
            de, dn = de + rng.gauss(0, noise), dn + rng.gauss(0, noise)
        hd = math.hypot(de, dn)
        dz = (p.z or 0.0) + th - (station.z + ih)
        hz = (math.degrees(math.atan2(de, dn)) - orientation_deg) % 360
        zen = math.degrees(math.atan2(hd, dz))
        out.append(ControlObservation(p, hz=hz, zenith=zen, slope_distance=math.hypot(hd, dz), target_height=th))
    return out


@pytest.mark.parametrize("seed", range(20))
def test_resection_round_trip_recovers_the_station(seed: int) -> None:
    """Coordinates -> simulated observations -> resection recovers the station within 0.1 mm."""
    rng = random.Random(seed)
    station = KnownPoint("FS", rng.uniform(-1e3, 1e3) + 5e5, rng.uniform(-1e3, 1e3) + 9.9e6, rng.uniform(90, 110))
    points = []
    for i in range(rng.randint(3, 6)):
        ang, dist = rng.uniform(0, 2 * math.pi), rng.uniform(10, 150)
        points.append(KnownPoint(f"CP{i}", station.e + dist * math.sin(ang), station.n + dist * math.cos(ang),
                                 station.z + rng.uniform(-3, 3)))
    orientation = rng.uniform(0, 360)
    obs = _observe(station, orientation, 1.6, points)
    r = resect(obs, instrument_height=1.6)
    assert math.hypot(r.e - station.e, r.n - station.n) < 1e-4
    assert r.z == pytest.approx(station.z, abs=1e-4)
    assert min(abs(r.orientation - orientation), 360 - abs(r.orientation - orientation)) < 1e-6
    assert abs(r.scale_ppm) < 1e-3
    assert max(float(x["d"]) for x in r.residuals) < 1e-6


def test_resection_in_gon_reports_orientation_in_degrees_too() -> None:
    station = KnownPoint("FS", 1000.0, 2000.0, 100.0)
    pts = [KnownPoint("A", 1050.0, 2000.0, 100.0), KnownPoint("B", 1000.0, 2060.0, 101.0),
           KnownPoint("C", 960.0, 1970.0, 99.0)]
    obs = [ControlObservation(o.point, o.hz * 400 / 360, o.zenith * 400 / 360, o.slope_distance, o.target_height)
           for o in _observe(station, 30.0, 1.5, pts)]
    r = resect(obs, instrument_height=1.5, angle_unit="gon")
    assert r.orientation == pytest.approx(30.0 * 400 / 360, abs=1e-7)
    assert r.orientation_deg == pytest.approx(30.0, abs=1e-7)


def test_two_points_warn_of_no_redundancy() -> None:
    station = KnownPoint("FS", 0.0, 0.0, 0.0)
    obs = _observe(station, 0.0, 1.5, [KnownPoint("A", 30.0, 0.0, 0.0), KnownPoint("B", 0.0, 40.0, 0.0)])
    r = resect(obs, instrument_height=1.5)
    assert r.warnings == ["only 2 control points: no redundancy, residuals are zero by construction; "
                          "add a third point to check the setup"]
    assert r.sd_e is None


def test_noisy_setup_reports_standard_deviations() -> None:
    rng = random.Random(7)
    station = KnownPoint("FS", 0.0, 0.0, 0.0)
    pts = [KnownPoint(f"P{i}", 50 * math.cos(i), 50 * math.sin(i), 0.0) for i in range(6)]
    r = resect(_observe(station, 12.0, 1.5, pts, noise=0.002, rng=rng), instrument_height=1.5)
    assert r.sd_e is not None and 0 < r.sd_e < 0.005
    assert math.hypot(r.e, r.n) < 0.005


def test_resection_over_tolerance_is_refused_naming_the_point() -> None:
    station = KnownPoint("FS", 0.0, 0.0, 0.0)
    pts = [KnownPoint("A", 50.0, 0.0), KnownPoint("B", 0.0, 50.0), KnownPoint("C", -50.0, 0.0), KnownPoint("D", 0.0, -50.0)]
    obs = _observe(station, 0.0, 1.5, pts)
    wrong = KnownPoint("C", -50.0, 0.30)  # control point C's coordinates were typed 0.30 m off
    obs[2] = ControlObservation(wrong, obs[2].hz, obs[2].zenith, obs[2].slope_distance, obs[2].target_height)
    with pytest.raises(ResectionRejected) as exc:
        resect(obs, instrument_height=1.5, tolerance_m=0.01)
    assert str(exc.value).startswith("free station refused: control point C is off by 0.")
    assert str(exc.value).endswith("m, more than the tolerance 0.01 m; re-shoot it, check its target height and "
                                   "coordinates, or drop it")


@pytest.mark.parametrize(
    ("points", "message"),
    [
        ([KnownPoint("A", 10, 0), KnownPoint("A", 0, 10)], "control point A is listed twice; give each point once"),
        ([KnownPoint("A", 10, 0), KnownPoint("B", 10, 0.0002)],
         "control points A and B coincide (less than 1 mm apart); use two distinct points"),
        ([KnownPoint("A", 10, 10), KnownPoint("B", 20, 20), KnownPoint("C", 30, 30)],
         "control points A, B, C lie on one line; add a point well off that line"),
        ([KnownPoint("A", 10, 10)], "a free station needs at least two control points; 1 given"),
    ],
)
def test_weak_geometry_is_refused(points: list[KnownPoint], message: str) -> None:
    obs = [ControlObservation(p, hz=1.0, zenith=90.0, slope_distance=10.0) for p in points]
    with pytest.raises(WeakGeometry) as exc:
        resect(obs, instrument_height=1.5)
    assert str(exc.value) == message
