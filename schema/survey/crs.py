"""CRS work through pyproj (PROJ), the authority for every projection; imported only inside functions.

A tablet build may have no PROJ (python-for-android has no modern pyproj recipe): ``have_proj()`` says so, and
``schema.survey.grid`` then falls back to a polynomial fitted by the server with PROJ.
"""

from __future__ import annotations

import functools
import importlib.util
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import ProjUnavailable, UnknownCRS

__all__ = ["WGS84", "crs_name", "have_proj", "lonlat_to_projected", "projected_to_lonlat"]

WGS84 = 4326
F = NDArray[np.float64]


def have_proj() -> bool:
    """Whether pyproj can be imported on this build."""
    return importlib.util.find_spec("pyproj") is not None


@functools.lru_cache(maxsize=64)
def _transformer(src: int | str, dst: int | str) -> Any:
    if not have_proj():
        raise ProjUnavailable(
            "this build has no PROJ (pyproj); coordinates from latitude/longitude need the site's fitted grid "
            "polynomial, which the camp server provides at enrolment"
        )
    import pyproj

    try:
        return pyproj.Transformer.from_crs(_crs(src), _crs(dst), always_xy=True)
    except pyproj.exceptions.CRSError as exc:
        raise UnknownCRS(f"cannot build the transformation {src} -> {dst}: {exc}") from None


def _crs(code: int | str) -> Any:
    import pyproj

    try:
        return pyproj.CRS.from_epsg(code) if isinstance(code, int) else pyproj.CRS.from_user_input(code)
    except pyproj.exceptions.CRSError:
        raise UnknownCRS(
            f"EPSG code {code} is not known to PROJ; check the site's CRS (e.g. 32736 for WGS 84 / UTM zone 36S)"
        ) from None


def crs_name(code: int | str) -> str:
    """The CRS's name, or ``UnknownCRS``."""
    if not have_proj():
        raise ProjUnavailable("this build has no PROJ (pyproj) to look up CRS names")
    return str(_crs(code).name)


def lonlat_to_projected(lon: ArrayLike, lat: ArrayLike, crs: int | str, *, src: int | str = WGS84) -> tuple[F, F]:
    """Projected E, N (metres) of longitudes/latitudes in ``src`` (default WGS 84)."""
    e, n = _transformer(src, crs).transform(np.asarray(lon, dtype=float), np.asarray(lat, dtype=float))
    return np.asarray(e, dtype=float), np.asarray(n, dtype=float)


def projected_to_lonlat(e: ArrayLike, n: ArrayLike, crs: int | str, *, dst: int | str = WGS84) -> tuple[F, F]:
    """Longitudes/latitudes in ``dst`` (default WGS 84) of projected E, N."""
    lon, lat = _transformer(crs, dst).transform(np.asarray(e, dtype=float), np.asarray(n, dtype=float))
    return np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
