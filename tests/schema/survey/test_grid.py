"""CRS work and the site grid, checked against published worked examples and against pyproj itself."""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest

from schema.errors import ProjUnavailable, UnknownCRS, WeakGeometry
from schema.survey import crs as crs_mod
from schema.survey import grid as grid_mod
from schema.survey.crs import lonlat_to_projected, projected_to_lonlat
from schema.survey.grid import (
    PointPair, crs_to_grid, eval_grid_polynomial, fit_grid, fit_grid_polynomial, grid_to_crs, latlon_to_grid,
)


def test_iogp_7_2_transverse_mercator_worked_example() -> None:
    # IOGP Publication 373-7-2 (Guidance Note 7-2), Transverse Mercator example: OSGB 1936 / British National
    # Grid (EPSG:27700), latitude 50 deg 30' N, longitude 0 deg 30' E -> E 577274.99 m, N 69740.50 m.
    e, n = lonlat_to_projected(0.5, 50.5, 27700, src=4277)
    assert (float(e), float(n)) == pytest.approx((577274.99, 69740.50), abs=0.02)
    lon, lat = projected_to_lonlat(577274.99, 69740.50, 27700, dst=4277)
    assert (float(lon), float(lat)) == pytest.approx((0.5, 50.5), abs=1e-6)


def test_snyder_ellipsoidal_transverse_mercator_example() -> None:
    # Snyder, Map Projections - A Working Manual, USGS Professional Paper 1395 (1987), ellipsoidal Transverse
    # Mercator numerical example: Clarke 1866, central meridian 75 deg W, k0 = 0.9996, phi = 40 deg 30' N,
    # lambda = 73 deg 30' W -> x = 127,106.5 m, y = 4,484,124.4 m (values recalled from memory of that example).
    src = "+proj=longlat +ellps=clrk66 +no_defs"
    dst = "+proj=tmerc +lat_0=0 +lon_0=-75 +k=0.9996 +x_0=0 +y_0=0 +ellps=clrk66 +units=m +no_defs"
    e, n = lonlat_to_projected(-73.5, 40.5, dst, src=src)
    assert (float(e), float(n)) == pytest.approx((127106.5, 4484124.4), abs=0.1)


def _meridian_arc(lat_deg: float, a: float = 6378137.0, f: float = 1 / 298.257223563) -> float:
    """Meridian distance from the equator, Snyder (1987) eq. 3-21, written out here independently of PROJ."""
    e2 = f * (2 - f)
    p = math.radians(lat_deg)
    return a * ((1 - e2 / 4 - 3 * e2**2 / 64 - 5 * e2**3 / 256) * p
                - (3 * e2 / 8 + 3 * e2**2 / 32 + 45 * e2**3 / 1024) * math.sin(2 * p)
                + (15 * e2**2 / 256 + 45 * e2**3 / 1024) * math.sin(4 * p)
                - (35 * e2**3 / 3072) * math.sin(6 * p))


@pytest.mark.parametrize("lat", [0.0, -1.0, -2.5, -7.0])
def test_utm_south_zone_false_northing(lat: float) -> None:
    # UTM south zones carry a false northing of 10,000,000 m and k0 = 0.9996 (UTM definition, NGA / EPSG);
    # on the central meridian (33 deg E for zone 36S) the northing is FN - k0 * M(phi).
    e, n = lonlat_to_projected(33.0, lat, 32736)
    assert float(e) == pytest.approx(500000.0, abs=1e-6)
    assert float(n) == pytest.approx(10_000_000.0 - 0.9996 * _meridian_arc(-lat), abs=1e-3)


def test_unknown_epsg_code_names_the_fix() -> None:
    with pytest.raises(UnknownCRS) as exc:
        lonlat_to_projected(33.0, -1.0, 99999)
    assert str(exc.value) == (
        "EPSG code 99999 is not known to PROJ; check the site's CRS (e.g. 32736 for WGS 84 / UTM zone 36S)"
    )


GRID = {"a": 1.00002 * math.cos(math.radians(23.5)), "b": 1.00002 * math.sin(math.radians(23.5)),
        "tx": 712345.678, "ty": 9812345.123}


def test_helmert_agrees_with_pyproj_affine() -> None:
    # the same four parameters run through PROJ's own affine operation (+proj=affine)
    a, b = GRID["a"], GRID["b"]
    pipe = pyproj.Transformer.from_pipeline(
        f"+proj=affine +xoff={GRID['tx']!r} +yoff={GRID['ty']!r} +s11={a!r} +s12={-b!r} +s21={b!r} +s22={a!r}"
    )
    rng = np.random.default_rng(3)
    x, y = rng.uniform(-500, 1500, 200), rng.uniform(-500, 1500, 200)
    ours = grid_to_crs(GRID, x, y)
    theirs = pipe.transform(x, y)
    assert np.abs(ours[0] - theirs[0]).max() < 1e-6 and np.abs(ours[1] - theirs[1]).max() < 1e-6
    back = crs_to_grid(GRID, *ours)
    assert np.abs(back[0] - x).max() < 1e-6 and np.abs(back[1] - y).max() < 1e-6


def _pairs(noise: float = 0.0, seed: int = 1) -> list[PointPair]:
    rng = np.random.default_rng(seed)
    xy = np.array([[0.0, 0.0], [100.0, 0.0], [0.0, 80.0], [120.0, 90.0], [60.0, 40.0]])
    e, n = grid_to_crs(GRID, xy[:, 0], xy[:, 1])
    e, n = e + rng.normal(0, noise, len(e)), n + rng.normal(0, noise, len(n))
    return [PointPair(f"CP{i}", x, y, float(ee), float(nn), 100.0, 101.25) for i, ((x, y), ee, nn) in enumerate(zip(xy, e, n))]


def test_fit_grid_recovers_rotation_scale_and_offset() -> None:
    fit = fit_grid(_pairs())
    assert fit.rotation_deg == pytest.approx(23.5, abs=1e-9)
    assert fit.scale == pytest.approx(1.00002, abs=1e-12)
    assert (fit.tx, fit.ty) == pytest.approx((GRID["tx"], GRID["ty"]), abs=1e-6)
    assert fit.vertical_offset_m == pytest.approx(-1.25)
    assert max(float(r["d"]) for r in fit.residuals) < 1e-6


def test_fit_grid_reports_residuals_of_noisy_points() -> None:
    fit = fit_grid(_pairs(noise=0.01))
    assert 0.001 < max(float(r["d"]) for r in fit.residuals) < 0.05
    assert fit.sigma0_m is not None and fit.sigma0_m < 0.03


def test_fit_grid_needs_two_distinct_points() -> None:
    with pytest.raises(WeakGeometry, match="at least two control points known in both systems; 1 given"):
        fit_grid(_pairs()[:1])


def test_polynomial_fallback_is_under_a_tenth_of_a_millimetre_over_10_km() -> None:
    poly = fit_grid_polynomial(grid=GRID, crs=32736, centre_x=500.0, centre_y=500.0, half_extent_m=5000.0, degree=3)
    assert poly.max_error_m < 1e-4 and poly.check_points == 101 * 101
    # independent check at random points, against PROJ directly
    rng = np.random.default_rng(11)
    gx, gy = rng.uniform(-4500, 5500, 500), rng.uniform(-4500, 5500, 500)
    lon, lat = projected_to_lonlat(*grid_to_crs(GRID, gx, gy), 32736)
    px, py = eval_grid_polynomial(poly, lat, lon)
    assert np.hypot(px - gx, py - gy).max() < 1e-4


def test_a_quadratic_is_not_enough_and_says_so() -> None:
    poly = fit_grid_polynomial(grid=GRID, crs=32736, centre_x=500.0, centre_y=500.0, degree=2)
    assert poly.max_error_m > 1e-4  # the stored error is honest: this fit would fail the goal


def test_tablet_without_proj_uses_the_polynomial(monkeypatch: pytest.MonkeyPatch) -> None:
    poly = fit_grid_polynomial(grid=GRID, crs=32736, centre_x=500.0, centre_y=500.0)
    lon, lat = projected_to_lonlat(*grid_to_crs(GRID, [612.3, -2400.0], [733.1, 4100.0]), 32736)
    with_proj = latlon_to_grid(lat, lon, grid=GRID, crs=32736, polynomial=poly)
    monkeypatch.setattr(crs_mod, "have_proj", lambda: False)
    monkeypatch.setattr(grid_mod, "have_proj", lambda: False)
    without = latlon_to_grid(lat, lon, grid=GRID, crs=32736, polynomial=poly)
    assert (with_proj[2], without[2]) == ("proj", "polynomial")
    assert np.hypot(without[0] - with_proj[0], without[1] - with_proj[1]).max() < 1e-4
    assert without[0] == pytest.approx([612.3, -2400.0], abs=1e-4)
    with pytest.raises(ProjUnavailable, match="sync with the camp server first"):
        latlon_to_grid(lat, lon, grid=GRID, crs=32736, polynomial=None)
