"""Simulated instrument output for the demo, the benchmarks and tests (and the tablet's instrument simulator).

``readings_for`` is the exact inverse of the polar reduction; noise is optional. ``gga``/``gst``/``rmc`` build
NMEA 0183 sentences with their checksums.
"""

from __future__ import annotations

import datetime as dt
import functools
import operator

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .angles import from_rad, wrap
from .polar import Station

__all__ = ["gga", "gnss_epoch", "gst", "nmea_sentence", "readings_for", "rmc"]

F = NDArray[np.float64]


def readings_for(
    station: Station, e: ArrayLike, n: ArrayLike, z: ArrayLike, target_height: ArrayLike,
    *, rng: np.random.Generator | None = None, sigma_angle: float = 0.0, sigma_distance_m: float = 0.0,
) -> tuple[F, F, F]:
    """Horizontal reading, zenith angle (station's unit) and slope distance that would observe these points."""
    de = np.asarray(e, dtype=float) - station.e
    dn = np.asarray(n, dtype=float) - station.n
    dz = np.asarray(z, dtype=float) + np.asarray(target_height, dtype=float) - (station.z + station.instrument_height)
    hd = np.hypot(de, dn)
    unit = station.angle_unit
    hz = wrap(from_rad(np.arctan2(de, dn), unit) - station.orientation, unit)
    zen = from_rad(np.arctan2(hd, dz), unit)
    sd = np.hypot(hd, dz)
    if rng is not None:
        hz = wrap(hz + rng.normal(0, sigma_angle, hz.shape), unit)
        zen = zen + rng.normal(0, sigma_angle, zen.shape)
        sd = sd + rng.normal(0, sigma_distance_m, sd.shape)
    return np.atleast_1d(hz), np.atleast_1d(zen), np.atleast_1d(sd)


def nmea_sentence(body: str) -> str:
    """``$body*CS`` with the NMEA 0183 checksum (XOR of the characters between '$' and '*')."""
    return f"${body}*{functools.reduce(operator.xor, map(ord, body), 0):02X}"


def _dm(value: float, width: int, pos: str, neg: str) -> tuple[str, str]:
    hemi = pos if value >= 0 else neg
    value = abs(value)
    deg = int(value)
    minutes = (value - deg) * 60
    if round(minutes, 7) >= 60:
        deg, minutes = deg + 1, 0.0
    return f"{deg:0{width}d}{minutes:010.7f}", hemi


def _hms(t: dt.datetime) -> str:
    return t.strftime("%H%M%S.") + f"{t.microsecond // 10000:02d}"


def gga(t: dt.datetime, lat: float, lon: float, *, quality: int, height_m: float, geoid_sep_m: float,
        satellites: int = 18, hdop: float = 0.7, talker: str = "GN") -> str:
    la, lh = _dm(lat, 2, "N", "S")
    lo, oh = _dm(lon, 3, "E", "W")
    return nmea_sentence(
        f"{talker}GGA,{_hms(t)},{la},{lh},{lo},{oh},{quality},{satellites:02d},{hdop:.1f},{height_m:.3f},M,"
        f"{geoid_sep_m:.3f},M,1.0,0001"
    )


def rmc(t: dt.datetime, lat: float, lon: float, *, talker: str = "GN") -> str:
    la, lh = _dm(lat, 2, "N", "S")
    lo, oh = _dm(lon, 3, "E", "W")
    return nmea_sentence(f"{talker}RMC,{_hms(t)},A,{la},{lh},{lo},{oh},0.01,0.0,{t:%d%m%y},,,R")


def gst(t: dt.datetime, *, sigma_lat: float, sigma_lon: float, sigma_alt: float, talker: str = "GN") -> str:
    return nmea_sentence(
        f"{talker}GST,{_hms(t)},0.010,{sigma_lat:.3f},{sigma_lon:.3f},0.0,{sigma_lat:.3f},{sigma_lon:.3f},{sigma_alt:.3f}"
    )


def gnss_epoch(site: object, e: float, n: float, z: float, at: dt.datetime, *, quality: int = 4) -> list[str]:
    """GGA, RMC and GST sentences a receiver standing on site-grid point E, N, Z would send at ``at`` (uses
    pyproj to go from the grid to latitude/longitude: the simulator runs where PROJ is, the demo and tests)."""
    from .crs import projected_to_lonlat
    from .grid import grid_to_crs

    ce, cn = grid_to_crs(site.grid, [e], [n])  # type: ignore[attr-defined]
    lon, lat = projected_to_lonlat(ce, cn, site.crs_epsg)  # type: ignore[attr-defined]
    utc = at.astimezone(dt.timezone.utc)
    h = z - site.vertical_offset_m  # type: ignore[attr-defined]
    fixed = quality == 4
    return [gga(utc, float(lat[0]), float(lon[0]), quality=quality, height_m=h, geoid_sep_m=-12.3),
            rmc(utc, float(lat[0]), float(lon[0])),
            gst(utc, sigma_lat=0.008 if fixed else 0.03, sigma_lon=0.007 if fixed else 0.03, sigma_alt=0.015)]
