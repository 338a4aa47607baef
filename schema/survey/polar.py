"""Polar reduction of total-station shots to grid E, N, Z (vectorised over many shots).

Conventions: horizontal readings and bearings run clockwise from grid north; the zenith angle is 0 straight up;
``orientation`` is the grid bearing of the instrument's zero horizontal reading; the prism constant (mm) is added
to the slope distance (give 0 if the instrument already applies it); station Z is the ground mark, so the line of
sight starts at Z + instrument height and ends at the target point Z + target height.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import ObservationInvalid
from .angles import FULL_CIRCLE, to_rad

__all__ = ["EARTH_RADIUS_M", "K_REFRACTION", "Reduced", "Station", "check_finite", "check_shots", "check_station",
           "reduce_shots"]

# Coefficient of atmospheric refraction: 0.13 is the customary value (Gauss), common practice, no source.
K_REFRACTION = 0.13
# Mean Earth radius (m), IUGG value, from memory.
EARTH_RADIUS_M = 6_371_000.0

F = NDArray[np.float64]


@dataclass(frozen=True)
class Station:
    """An instrument setup as the reduction needs it."""

    e: float
    n: float
    z: float
    instrument_height: float
    orientation: float  # in angle_unit
    angle_unit: str = "deg"


@dataclass(frozen=True)
class Reduced:
    """Reduced shots: horizontal distance, height difference (instrument axis to target) and E, N, Z."""

    hd: F
    dh: F
    e: F
    n: F
    z: F


# What each number of a station is, for the fix of a message that refuses it.
STATION_FIELDS = {
    "e": "the station's grid easting in metres",
    "n": "the station's grid northing in metres",
    "z": "the height of the ground mark in metres",
    "instrument_height": "the instrument's height above the ground mark in metres",
    "orientation": "the grid bearing of the zero reading, in the angle unit",
}


def check_finite(name: str, value: object, fix: str) -> float:
    """``value`` as a float when it is a finite number (not text, not true/false, not NaN or infinity);
    otherwise ``ObservationInvalid`` naming ``name`` and the value, with ``fix``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ObservationInvalid(f"{name} {value!r} is not a number; {fix}")
    if not math.isfinite(value):
        raise ObservationInvalid(f"{name} {value!r} is not a finite number; {fix}")
    return float(value)


def check_station(station: Station) -> None:
    """Refuse a station whose unit is not deg or gon, or one of whose numbers is not finite."""
    if station.angle_unit not in FULL_CIRCLE:
        raise ObservationInvalid(f"angle unit {station.angle_unit!r} is not known; use 'deg' or 'gon'")
    for name, what in STATION_FIELDS.items():
        check_finite(f"station {name}", getattr(station, name), f"give {what}")


def check_shots(hz: F, zenith: F, slope_distance: F, target_height: F, unit: str) -> None:
    """Refuse readings outside their range, naming the first bad shot (0-based index) and its value."""
    full = FULL_CIRCLE[unit]
    checks = (
        ("zenith angle", zenith, (zenith <= 0) | (zenith >= full), f"outside 0-{full:g} {unit}", "re-read the vertical circle"),
        ("horizontal reading", hz, (hz < 0) | (hz >= full), f"outside 0-{full:g} {unit}", "reduce it into one turn"),
        ("slope distance", slope_distance, ~(slope_distance > 0), "not a positive distance", "re-measure the distance"),
        ("target height", target_height, ~(target_height >= 0), "negative", "give the pole height above the point"),
    )
    for name, values, bad, what, fix in checks:
        bad = bad | ~np.isfinite(values)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ObservationInvalid(f"shot {i + 1}: {name} {values[i]:g} is {what}; {fix}")


def reduce_shots(
    station: Station,
    hz: ArrayLike,
    zenith: ArrayLike,
    slope_distance: ArrayLike,
    target_height: ArrayLike,
    prism_constant_mm: ArrayLike = 0.0,
    *,
    curvature_refraction: bool = False,
    k: float = K_REFRACTION,
) -> Reduced:
    """Grid coordinates of target points from raw readings (arrays or scalars, broadcast together)."""
    hz_a, zen_a, sd_a, th_a = (np.atleast_1d(np.asarray(x, dtype=float)) for x in (hz, zenith, slope_distance, target_height))
    hz_a, zen_a, sd_a, th_a = np.broadcast_arrays(hz_a, zen_a, sd_a, th_a)
    check_station(station)
    check_shots(hz_a, zen_a, sd_a, th_a, station.angle_unit)
    sd = sd_a + np.asarray(prism_constant_mm, dtype=float) / 1000.0
    z_rad = to_rad(zen_a, station.angle_unit)
    hd = sd * np.sin(z_rad)
    dh = sd * np.cos(z_rad)
    if curvature_refraction:
        dh = dh + (1.0 - k) * hd**2 / (2.0 * EARTH_RADIUS_M)
    bearing = to_rad(hz_a + station.orientation, station.angle_unit)
    e = station.e + hd * np.sin(bearing)
    n = station.n + hd * np.cos(bearing)
    z = station.z + station.instrument_height + dh - th_a
    return Reduced(hd, dh, e, n, z)
