"""Instrument setups: orientation from backsights over a known station, and free-station resection.

Both return plain results with every residual, so the tablet can show them before recording is allowed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import ObservationInvalid, ResectionRejected, WeakGeometry
from .angles import FULL_CIRCLE, circular_mean, from_rad, signed, to_rad, wrap
from .polar import check_finite, check_shots
from .similarity import check_geometry, fit_similarity

__all__ = [
    "Backsight", "BacksightResult", "ControlObservation", "KnownPoint", "Orientation", "Resection",
    "orient_by_backsights", "resect",
]


@dataclass(frozen=True)
class KnownPoint:
    code: str
    e: float
    n: float
    z: float | None = None


@dataclass(frozen=True)
class Backsight:
    """A reading to a known point from the occupied station; distance and zenith optional."""

    point: KnownPoint
    hz: float
    zenith: float | None = None
    slope_distance: float | None = None


@dataclass(frozen=True)
class BacksightResult:
    code: str
    orientation: float  # this backsight's own orientation, in the setup's unit
    angle_residual: float  # this one minus the mean, in the setup's unit
    distance_residual_m: float | None  # measured minus computed horizontal distance


@dataclass(frozen=True)
class Orientation:
    orientation: float
    angle_unit: str
    backsights: list[BacksightResult]
    warnings: list[str] = field(default_factory=list)


def orient_by_backsights(
    station: KnownPoint, backsights: list[Backsight], *, angle_unit: str = "deg"
) -> Orientation:
    """Orientation of the zero reading from one or more backsights, combined by a circular mean."""
    if not backsights:
        raise ObservationInvalid(
            f"station {station.code}: no backsight given; shoot at least one known control point to orient"
        )
    own = []
    for bs in backsights:
        de, dn = bs.point.e - station.e, bs.point.n - station.n
        if math.hypot(de, dn) < 1e-3:
            raise WeakGeometry(f"backsight {bs.point.code} is the occupied station itself; choose another point")
        bearing = float(wrap(from_rad(math.atan2(de, dn), angle_unit), angle_unit))
        check_shots(np.array([bs.hz]), np.array([bs.zenith or FULL_CIRCLE[angle_unit] / 4]),
                    np.array([bs.slope_distance or 1.0]), np.array([0.0]), angle_unit)
        own.append(float(wrap(bearing - bs.hz, angle_unit)))
    mean = circular_mean(own, angle_unit)
    results = []
    for bs, o in zip(backsights, own):
        dist_res = None
        if bs.slope_distance is not None:
            zen = bs.zenith if bs.zenith is not None else FULL_CIRCLE[angle_unit] / 4
            hd = bs.slope_distance * math.sin(float(to_rad(zen, angle_unit)))
            dist_res = hd - math.hypot(bs.point.e - station.e, bs.point.n - station.n)
        results.append(BacksightResult(bs.point.code, o, float(signed(o - mean, angle_unit)), dist_res))
    warnings = [] if len(backsights) > 1 else ["one backsight only: the orientation has no check; shoot a second point"]
    return Orientation(mean, angle_unit, results, warnings)


@dataclass(frozen=True)
class ControlObservation:
    """A reading from the free station to a control point."""

    point: KnownPoint
    hz: float
    zenith: float
    slope_distance: float
    target_height: float = 0.0


@dataclass(frozen=True)
class Resection:
    e: float
    n: float
    z: float | None
    orientation: float
    angle_unit: str
    scale: float
    scale_ppm: float
    sd_e: float | None
    sd_n: float | None
    sd_z: float | None
    residuals: list[dict[str, float | str]]
    warnings: list[str]

    @property
    def orientation_deg(self) -> float:
        return float(wrap(self.orientation * (360.0 / FULL_CIRCLE[self.angle_unit]), "deg"))


def resect(
    observations: list[ControlObservation],
    *,
    instrument_height: float,
    angle_unit: str = "deg",
    tolerance_m: float = 0.01,
) -> Resection:
    """Free station from directions and distances to two or more control points (least squares).

    The readings give each point in the instrument's frame (x = hd sin hz, y = hd cos hz); a 2D similarity from
    that frame to the grid gives the station (its translation), the orientation (minus its rotation) and the
    scale. Refused when a point's residual exceeds ``tolerance_m``; warned when two points leave no redundancy.
    """
    check_finite("instrument height", instrument_height, "give the instrument's height above the ground mark in metres")
    check_finite("tolerance", tolerance_m, "give the largest residual to accept, in metres (e.g. 0.01)")
    if len(observations) < 2:
        raise WeakGeometry(f"a free station needs at least two control points; {len(observations)} given")
    pts = np.array([[o.point.e, o.point.n] for o in observations])
    codes = [o.point.code for o in observations]
    check_geometry(pts, codes, "control point")
    hz = np.array([o.hz for o in observations])
    zen = np.array([o.zenith for o in observations])
    sd = np.array([o.slope_distance for o in observations])
    th = np.array([o.target_height for o in observations])
    check_shots(hz, zen, sd, th, angle_unit)
    zr, hr = to_rad(zen, angle_unit), to_rad(hz, angle_unit)
    hd = sd * np.sin(zr)
    local = np.column_stack((hd * np.sin(hr), hd * np.cos(hr)))
    # grid (E, N) and the instrument frame are both "x east-ish, y north-ish" frames: dst = T + R(theta) src
    sim = fit_similarity(local, pts)
    orientation = float(wrap(from_rad(-sim.rotation_rad, angle_unit), angle_unit))
    z, sd_z = _station_height(observations, sd * np.cos(zr), th, instrument_height)
    residuals = [
        {"point": c, "de": float(r[0]), "dn": float(r[1]), "d": float(math.hypot(*r))}
        for c, r in zip(codes, sim.residuals)
    ]
    warnings = []
    if z is None:
        warnings.append("no control point has a height (z), so the station has no Z; give the control points' z "
                        "to get one")
    if len(observations) < 3:
        warnings.append(
            f"only {len(observations)} control points: no redundancy, residuals are zero by construction; "
            "add a third point to check the setup"
        )
    worst = max(residuals, key=lambda r: float(r["d"]))
    if float(worst["d"]) > tolerance_m:
        raise ResectionRejected(
            f"free station refused: control point {worst['point']} is off by {float(worst['d']):.4f} m, more than "
            f"the tolerance {tolerance_m:g} m; re-shoot it, check its target height and coordinates, or drop it"
        )
    return Resection(
        e=sim.tx, n=sim.ty, z=z, orientation=orientation, angle_unit=angle_unit, scale=sim.scale,
        scale_ppm=(sim.scale - 1.0) * 1e6, sd_e=sim.sd_t[0] if sim.sd_t else None,
        sd_n=sim.sd_t[1] if sim.sd_t else None, sd_z=sd_z, residuals=residuals, warnings=warnings,
    )


def _station_height(
    observations: list[ControlObservation], dh: np.ndarray, th: np.ndarray, ih: float
) -> tuple[float | None, float | None]:
    """Ground Z under the instrument from every control point with a height: Z_point + th - dh - ih."""
    zs = [o.point.z + t - d - ih for o, d, t in zip(observations, dh, th) if o.point.z is not None]
    if not zs:
        return None, None
    arr = np.array(zs)
    sd = float(arr.std(ddof=1) / math.sqrt(len(arr))) if len(arr) > 1 else None
    return float(arr.mean()), sd
