"""Point-in-polygon, distance to an outline and surface interpolation, against shapely and scipy
(general-purpose reference libraries) on random cases."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.interpolate import LinearNDInterpolator

from schema.strata.geometry import Surface, distance_to_ring, points_in_ring


@settings(max_examples=60)
@given(seed=st.integers(0, 10**6), corners=st.integers(3, 12))
def test_points_in_ring_matches_shapely(seed: int, corners: int) -> None:
    rng = np.random.default_rng(seed)
    # a star-shaped (so simple) polygon around the origin
    angles = np.sort(rng.uniform(0, 2 * np.pi, corners))
    radii = rng.uniform(0.5, 3.0, corners)
    ring = np.column_stack((radii * np.cos(angles), radii * np.sin(angles)))
    poly = shapely.Polygon(ring)
    if not poly.is_valid or poly.area < 1e-3:
        return
    x, y = rng.uniform(-3.5, 3.5, 400), rng.uniform(-3.5, 3.5, 400)
    near_edge = shapely.distance(poly.exterior, shapely.points(x, y)) < 1e-9
    ours = points_in_ring(x, y, ring)
    assert (ours[~near_edge] == shapely.contains_xy(poly, x, y)[~near_edge]).all()
    d = distance_to_ring(x, y, ring)
    assert np.abs(d - shapely.distance(poly.exterior, shapely.points(x, y))).max() < 1e-9


@settings(max_examples=40)
@given(seed=st.integers(0, 10**6), n=st.integers(3, 30))
def test_surface_interpolation_matches_scipy_inside_the_hull(seed: int, n: int) -> None:
    rng = np.random.default_rng(seed)
    pts = np.column_stack((rng.uniform(0, 4, n), rng.uniform(0, 3, n), rng.uniform(98, 100, n)))
    if np.linalg.matrix_rank(pts[:, :2] - pts[:, :2].mean(axis=0)) < 2:
        return
    surface = Surface.from_points(pts)
    x, y = rng.uniform(-0.5, 4.5, 300), rng.uniform(-0.5, 3.5, 300)
    z, method = surface.z_at(x, y)
    ref = LinearNDInterpolator(pts[:, :2], pts[:, 2])(x, y)
    inside = ~np.isnan(ref)
    # Delaunay is unique for points in general position, so both libraries interpolate on the same triangles
    if inside.any():
        assert np.abs(z[inside] - ref[inside]).max() < 1e-9
    assert set(method[inside]) <= {"triangulation"}
    assert set(method[~inside]) <= {"plane"}


def test_plane_fallback_and_mean() -> None:
    tilted = Surface.from_points([(0, 0, 100.0), (10, 0, 101.0), (0, 10, 100.0), (10, 10, 101.0)])
    z, method = tilted.z_at([20.0], [5.0])  # outside: the plane z = 100 + 0.1 * e continues
    assert z[0] == pytest.approx(102.0) and method[0] == "plane"
    two = Surface.from_points([(0, 0, 99.0), (1, 1, 99.2)])
    z, method = two.z_at([0.5], [0.5])
    assert z[0] == pytest.approx(99.1) and method[0] == "mean"
