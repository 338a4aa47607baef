"""The site grid: a 2D similarity (Helmert) to the site's projected CRS, and its PROJ-free fallback.

``fit_grid`` fits the similarity from control points known in both systems (residuals, rotation and scale
reported, plus the mean vertical offset where heights are known in both). ``fit_grid_polynomial`` (server, with
PROJ) fits a small polynomial latitude/longitude -> site grid over the site's extent and measures its worst
error on a dense check grid; ``latlon_to_grid`` uses PROJ when present and that polynomial otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from pydantic import BaseModel, ConfigDict

from ..errors import ProjUnavailable, WeakGeometry
from ..records.site import GridPolynomial
from .crs import have_proj, lonlat_to_projected, projected_to_lonlat
from .similarity import Similarity, check_geometry, fit_similarity

__all__ = [
    "GridFit", "GridPolynomial", "GridTransformLike", "PointPair", "eval_grid_polynomial", "fit_grid",
    "fit_grid_polynomial", "grid_to_crs", "crs_to_grid", "latlon_to_grid",
]

F = NDArray[np.float64]


class GridTransformLike(BaseModel):
    """The four Helmert parameters (the same shape as ``schema.records.GridTransform``)."""

    model_config = ConfigDict(extra="ignore")
    a: float
    b: float
    tx: float
    ty: float


def _sim(grid: object) -> Similarity:
    g = GridTransformLike.model_validate(grid, from_attributes=True)
    return Similarity(g.a, g.b, g.tx, g.ty, np.zeros((0, 2)), None, None)


def grid_to_crs(grid: object, x: ArrayLike, y: ArrayLike) -> tuple[F, F]:
    p = _sim(grid).apply(np.column_stack((np.ravel(x), np.ravel(y))))
    return p[:, 0], p[:, 1]


def crs_to_grid(grid: object, e: ArrayLike, n: ArrayLike) -> tuple[F, F]:
    p = _sim(grid).invert(np.column_stack((np.ravel(e), np.ravel(n))))
    return p[:, 0], p[:, 1]


@dataclass(frozen=True)
class PointPair:
    code: str
    x: float  # site grid E
    y: float  # site grid N
    e: float  # CRS easting
    n: float  # CRS northing
    z_grid: float | None = None
    z_crs: float | None = None


@dataclass(frozen=True)
class GridFit:
    a: float
    b: float
    tx: float
    ty: float
    rotation_deg: float  # counterclockwise from the grid axes to the CRS axes
    scale: float
    vertical_offset_m: float | None  # mean of z_grid - z_crs: "site datum Z minus CRS height", as on Site
    residuals: list[dict[str, float | str]]
    sigma0_m: float | None
    warnings: list[str]

    def as_grid_transform(self) -> dict[str, float]:
        return {"a": self.a, "b": self.b, "tx": self.tx, "ty": self.ty}


def fit_grid(pairs: list[PointPair]) -> GridFit:
    """Fit the site grid -> CRS similarity from two or more control points known in both systems."""
    if len(pairs) < 2:
        raise WeakGeometry(f"fitting the site grid needs at least two control points known in both systems; {len(pairs)} given")
    src = np.array([[p.x, p.y] for p in pairs])
    check_geometry(src, [p.code for p in pairs], "control point")
    sim = fit_similarity(src, np.array([[p.e, p.n] for p in pairs]))
    dz = [p.z_grid - p.z_crs for p in pairs if p.z_crs is not None and p.z_grid is not None]
    warnings = []
    if len(pairs) < 3:
        warnings.append("only two control points: no redundancy, residuals are zero by construction; add a third")
    if abs(sim.scale - 1.0) > 0.001:
        warnings.append(f"scale {sim.scale:.6f} differs from 1 by more than 1000 ppm; check the grid and CRS values")
    return GridFit(
        a=sim.a, b=sim.b, tx=sim.tx, ty=sim.ty, rotation_deg=math.degrees(sim.rotation_rad), scale=sim.scale,
        vertical_offset_m=float(np.mean(dz)) if dz else None,
        residuals=[{"point": p.code, "de": float(r[0]), "dn": float(r[1]), "d": float(math.hypot(*r))}
                   for p, r in zip(pairs, sim.residuals)],
        sigma0_m=sim.sigma0, warnings=warnings,
    )


def _monomials(u: F, v: F, degree: int) -> F:
    return np.column_stack([u**i * v**j for i in range(degree + 1) for j in range(degree + 1 - i)])


def eval_grid_polynomial(poly: GridPolynomial, lat: ArrayLike, lon: ArrayLike) -> tuple[F, F]:
    """Site grid E, N from WGS 84 latitude/longitude with the fitted polynomial (numpy only, no PROJ)."""
    u = (np.ravel(np.asarray(lon, dtype=float)) - poly.lon0) / poly.span_deg
    v = (np.ravel(np.asarray(lat, dtype=float)) - poly.lat0) / poly.span_deg
    m = _monomials(u, v, poly.degree)
    return m @ np.asarray(poly.cx), m @ np.asarray(poly.cy)


def _truth(grid: object, crs: int, lat: F, lon: F) -> tuple[F, F]:
    e, n = lonlat_to_projected(lon, lat, crs)
    return crs_to_grid(grid, e, n)


def fit_grid_polynomial(
    *, grid: object, crs: int, centre_x: float, centre_y: float, half_extent_m: float = 5000.0,
    degree: int = 3, fit_n: int = 25, check_n: int = 101,
) -> GridPolynomial:
    """Fit the fallback polynomial over a square of ``2 * half_extent_m`` around a grid point, with PROJ.

    The fit samples a ``fit_n`` x ``fit_n`` lattice; the error is then measured against PROJ on a denser,
    offset ``check_n`` x ``check_n`` lattice over the same square and stored with the coefficients.
    """
    if not have_proj():
        raise ProjUnavailable("fitting the grid polynomial needs PROJ (pyproj); run it on the camp server")
    ce, cn = grid_to_crs(grid, [centre_x], [centre_y])
    lon0, lat0 = (float(a[0]) for a in projected_to_lonlat(ce, cn, crs))
    corners_e, corners_n = grid_to_crs(
        grid, centre_x + half_extent_m * np.array([-1, 1, 1, -1]), centre_y + half_extent_m * np.array([-1, -1, 1, 1])
    )
    lon_c, lat_c = projected_to_lonlat(corners_e, corners_n, crs)
    lon_lo, lon_hi, lat_lo, lat_hi = lon_c.min(), lon_c.max(), lat_c.min(), lat_c.max()
    span = float(max(lon_hi - lon_lo, lat_hi - lat_lo) / 2)
    glon, glat = np.meshgrid(np.linspace(lon_lo, lon_hi, fit_n), np.linspace(lat_lo, lat_hi, fit_n))
    glon, glat = glon.ravel(), glat.ravel()
    x, y = _truth(grid, crs, glat, glon)
    m = _monomials((glon - lon0) / span, (glat - lat0) / span, degree)
    cx, *_ = np.linalg.lstsq(m, x, rcond=None)
    cy, *_ = np.linalg.lstsq(m, y, rcond=None)
    poly = GridPolynomial(degree=degree, lat0=lat0, lon0=lon0, span_deg=span, cx=cx.tolist(), cy=cy.tolist(),
                          half_extent_m=half_extent_m, max_error_m=0.0, check_points=check_n * check_n)
    step_lon, step_lat = (lon_hi - lon_lo) / (check_n - 1), (lat_hi - lat_lo) / (check_n - 1)
    klon, klat = np.meshgrid(np.linspace(lon_lo + step_lon / 3, lon_hi - step_lon / 3, check_n),
                             np.linspace(lat_lo + step_lat / 3, lat_hi - step_lat / 3, check_n))
    tx, ty = _truth(grid, crs, klat.ravel(), klon.ravel())
    px, py = eval_grid_polynomial(poly, klat.ravel(), klon.ravel())
    poly.max_error_m = float(np.hypot(px - tx, py - ty).max())
    return poly


def latlon_to_grid(
    lat: ArrayLike, lon: ArrayLike, *, grid: object, crs: int, polynomial: GridPolynomial | None = None
) -> tuple[F, F, str]:
    """Site grid E, N of WGS 84 positions, and which method gave them ('proj' or 'polynomial')."""
    if have_proj():
        x, y = _truth(grid, crs, np.ravel(np.asarray(lat, dtype=float)), np.ravel(np.asarray(lon, dtype=float)))
        return x, y, "proj"
    if polynomial is None:
        raise ProjUnavailable(
            "this tablet has no PROJ and the site has no fitted grid polynomial; sync with the camp server first"
        )
    x, y = eval_grid_polynomial(polynomial, lat, lon)
    return x, y, "polynomial"
