"""Polar reduction, checked on cases whose answer is known in closed form."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from schema.errors import ObservationInvalid
from schema.survey.polar import EARTH_RADIUS_M, K_REFRACTION, Station, reduce_shots

# 3-4-5 right triangle: a target 3 m east and 4 m north of the station is 5 m away on bearing atan(3/4)
# (36.869898 deg, 40.966553 gon); closed form, no source needed.
BEARING_345_DEG = math.degrees(math.atan2(3, 4))


def test_345_triangle_level_shot() -> None:
    st_ = Station(e=100.0, n=200.0, z=50.0, instrument_height=1.5, orientation=0.0)
    r = reduce_shots(st_, BEARING_345_DEG, 90.0, 5.0, 1.5)
    assert r.hd[0] == pytest.approx(5.0, abs=1e-12)
    assert (r.e[0], r.n[0], r.z[0]) == pytest.approx((103.0, 204.0, 50.0), abs=1e-9)


def test_345_triangle_in_gon_with_height() -> None:
    # target 1.2 m above the instrument axis: slope distance sqrt(25 + 1.44), zenith atan2(5, 1.2)
    sd = math.hypot(5.0, 1.2)
    zen_gon = math.degrees(math.atan2(5.0, 1.2)) * 400 / 360
    st_ = Station(e=0.0, n=0.0, z=10.0, instrument_height=1.6, orientation=0.0, angle_unit="gon")
    r = reduce_shots(st_, BEARING_345_DEG * 400 / 360, zen_gon, sd, 2.0)
    assert (r.e[0], r.n[0]) == pytest.approx((3.0, 4.0), abs=1e-9)
    assert r.dh[0] == pytest.approx(1.2, abs=1e-12)
    assert r.z[0] == pytest.approx(10.0 + 1.6 + 1.2 - 2.0, abs=1e-12)


def test_orientation_rotates_every_shot() -> None:
    st_ = Station(e=0.0, n=0.0, z=0.0, instrument_height=0.0, orientation=90.0)
    r = reduce_shots(st_, 0.0, 90.0, 10.0, 0.0)  # zero reading points grid east
    assert (r.e[0], r.n[0]) == pytest.approx((10.0, 0.0), abs=1e-9)


def test_prism_constant_adds_to_the_distance() -> None:
    st_ = Station(0.0, 0.0, 0.0, 0.0, 0.0)
    r = reduce_shots(st_, 0.0, 90.0, 10.0, 0.0, prism_constant_mm=-30.0)
    assert r.hd[0] == pytest.approx(9.970, abs=1e-12)


def test_curvature_and_refraction() -> None:
    # height correction (1 - k) * D^2 / (2R): at D = 1000 m with k = 0.13 and R = 6371 km, 0.068278 m
    st_ = Station(0.0, 0.0, 0.0, 0.0, 0.0)
    plain = reduce_shots(st_, 0.0, 90.0, 1000.0, 0.0)
    corrected = reduce_shots(st_, 0.0, 90.0, 1000.0, 0.0, curvature_refraction=True)
    expected = (1 - K_REFRACTION) * 1000.0**2 / (2 * EARTH_RADIUS_M)
    assert corrected.z[0] - plain.z[0] == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(0.068278, abs=1e-6)
    # negligible at trench distances: under 0.3 mm at 60 m
    near = reduce_shots(st_, 0.0, 90.0, 60.0, 0.0, curvature_refraction=True)
    assert abs(near.z[0]) < 3e-4


@pytest.mark.parametrize(
    ("unit", "hz", "zenith", "sd", "th", "message"),
    [
        ("gon", 10.0, 412.0, 5.0, 1.5, "shot 1: zenith angle 412 is outside 0-400 gon; re-read the vertical circle"),
        ("deg", 10.0, 361.0, 5.0, 1.5, "shot 1: zenith angle 361 is outside 0-360 deg; re-read the vertical circle"),
        ("deg", 10.0, 0.0, 5.0, 1.5, "shot 1: zenith angle 0 is outside 0-360 deg; re-read the vertical circle"),
        ("deg", 10.0, 90.0, -5.0, 1.5, "shot 1: slope distance -5 is not a positive distance; re-measure the distance"),
        ("deg", 360.0, 90.0, 5.0, 1.5, "shot 1: horizontal reading 360 is outside 0-360 deg; reduce it into one turn"),
        ("deg", 10.0, 90.0, 5.0, -0.1, "shot 1: target height -0.1 is negative; give the pole height above the point"),
    ],
)
def test_bad_readings_are_named(unit: str, hz: float, zenith: float, sd: float, th: float, message: str) -> None:
    with pytest.raises(ObservationInvalid) as exc:
        reduce_shots(Station(0, 0, 0, 1.5, 0, unit), hz, zenith, sd, th)
    assert str(exc.value) == message


def test_bad_reading_in_a_batch_names_its_position() -> None:
    with pytest.raises(ObservationInvalid, match="^shot 3: slope distance nan"):
        reduce_shots(Station(0, 0, 0, 1.5, 0), [1, 2, 3], [90, 90, 90], [5, 5, float("nan")], [1, 1, 1])


@settings(max_examples=50)
@given(
    hz=st.lists(st.floats(0, 359.999), min_size=1, max_size=20),
    zen=st.floats(60, 120), sd=st.floats(0.5, 300), orientation=st.floats(0, 359.999),
)
def test_vectorised_equals_one_by_one(hz: list[float], zen: float, sd: float, orientation: float) -> None:
    st_ = Station(500.0, 800.0, 100.0, 1.55, orientation)
    batch = reduce_shots(st_, hz, zen, sd, 1.3)
    for i, h in enumerate(hz):
        one = reduce_shots(st_, h, zen, sd, 1.3)
        assert (batch.e[i], batch.n[i], batch.z[i]) == pytest.approx((one.e[0], one.n[0], one.z[0]), abs=1e-9)
    # the horizontal distance is preserved whatever the orientation
    assert np.hypot(batch.e - 500.0, batch.n - 800.0) == pytest.approx(batch.hd, abs=1e-9)
