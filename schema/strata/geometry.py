"""Plan geometry for the checks: points in trench outlines, distance to an outline, and unit surfaces
interpolated from level points. Vectorised with numpy over many finds.

Surfaces: linear interpolation on the Delaunay triangulation of a surface's level points (triangles from
shapely/GEOS). Outside the triangulation's hull, and with points that do not span an area, the fallback is the
least-squares plane through the surface's points (three or more) or their mean Z (one or two); the method used
is reported with each value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["Surface", "distance_to_ring", "points_in_ring"]

F = NDArray[np.float64]


def _ring(outline: ArrayLike) -> F:
    ring = np.asarray(outline, dtype=float).reshape(-1, 2)
    if len(ring) > 3 and np.allclose(ring[0], ring[-1]):
        ring = ring[:-1]
    return ring


def points_in_ring(x: ArrayLike, y: ArrayLike, outline: ArrayLike) -> NDArray[np.bool_]:
    """Even-odd (crossing number) test of many points against one polygon ring."""
    px, py = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    ring = _ring(outline)
    inside = np.zeros(px.shape, dtype=bool)
    x1, y1 = ring[:, 0], ring[:, 1]
    x2, y2 = np.roll(x1, -1), np.roll(y1, -1)
    for ax, ay, bx, by in zip(x1, y1, x2, y2):
        crosses = (ay > py) != (by > py)
        with np.errstate(divide="ignore", invalid="ignore"):
            xcross = ax + (py - ay) * (bx - ax) / (by - ay)
        inside ^= crosses & (px < xcross)
    return inside


def distance_to_ring(x: ArrayLike, y: ArrayLike, outline: ArrayLike) -> F:
    """Shortest distance from each point to the ring's edges (0 on an edge)."""
    px, py = np.asarray(x, dtype=float)[..., None], np.asarray(y, dtype=float)[..., None]
    ring = _ring(outline)
    a, b = ring, np.roll(ring, -1, axis=0)
    d = b - a
    length2 = (d**2).sum(axis=1)
    t = ((px - a[:, 0]) * d[:, 0] + (py - a[:, 1]) * d[:, 1]) / np.where(length2 == 0, 1, length2)
    t = np.clip(t, 0, 1)
    cx, cy = a[:, 0] + t * d[:, 0], a[:, 1] + t * d[:, 1]
    return np.sqrt((px - cx) ** 2 + (py - cy) ** 2).min(axis=-1)


@dataclass(frozen=True)
class Surface:
    """A unit's top or bottom surface from its level points."""

    points: F  # (n, 3) E, N, Z
    triangles: F  # (t, 3, 3) vertex E, N, Z of each Delaunay triangle
    plane: F | None  # (3,) z = p0 + p1 * (e - e0) + p2 * (n - n0), with the centre below
    centre: F

    @classmethod
    def from_points(cls, points: ArrayLike) -> "Surface":
        pts = np.asarray(points, dtype=float).reshape(-1, 3)
        if len(pts) == 0:
            raise ValueError("a surface needs at least one level point")
        centre = pts[:, :2].mean(axis=0)
        return cls(pts, _triangulate(pts), _plane(pts, centre), centre)

    def z_at(self, x: ArrayLike, y: ArrayLike) -> tuple[F, NDArray[np.str_]]:
        """Z at each point, and how it was found: 'triangulation', 'plane' or 'mean'."""
        px, py = np.atleast_1d(np.asarray(x, dtype=float)), np.atleast_1d(np.asarray(y, dtype=float))
        z = np.full(px.shape, np.nan)
        method = np.full(px.shape, "triangulation", dtype=object)
        todo = np.ones(px.shape, dtype=bool)
        for tri in self.triangles:
            if not todo.any():
                break
            w = _barycentric(px[todo], py[todo], tri)
            hit = (w >= -1e-9).all(axis=1)
            idx = np.flatnonzero(todo)[hit]
            z[idx] = (w[hit] * tri[:, 2]).sum(axis=1)
            todo[idx] = False
        if todo.any():
            if self.plane is not None:
                dx, dy = px[todo] - self.centre[0], py[todo] - self.centre[1]
                z[todo] = self.plane[0] + self.plane[1] * dx + self.plane[2] * dy
                method[todo] = "plane"
            else:
                z[todo] = self.points[:, 2].mean()
                method[todo] = "mean"
        return z, method.astype(str)


def _triangulate(pts: F) -> F:
    if len(pts) < 3:
        return np.zeros((0, 3, 3))
    import shapely

    tris = shapely.delaunay_triangles(shapely.multipoints(pts[:, :2]))
    z_of = {(round(e, 9), round(n, 9)): z for e, n, z in pts}
    out = []
    for i in range(shapely.get_num_geometries(tris)):
        coords = shapely.get_coordinates(shapely.get_geometry(tris, i))[:3]
        out.append([[e, n, z_of[(round(e, 9), round(n, 9))]] for e, n in coords])
    return np.asarray(out, dtype=float).reshape(-1, 3, 3)


def _plane(pts: F, centre: F) -> F | None:
    if len(pts) < 3:
        return None
    a = np.column_stack((np.ones(len(pts)), pts[:, 0] - centre[0], pts[:, 1] - centre[1]))
    if np.linalg.matrix_rank(a) < 3:
        return None
    coef, *_ = np.linalg.lstsq(a, pts[:, 2], rcond=None)
    return coef


def _barycentric(px: F, py: F, tri: F) -> F:
    (x1, y1, _), (x2, y2, _), (x3, y3, _) = tri
    det = (y2 - y3) * (x1 - x3) + (x3 - x2) * (y1 - y3)
    if abs(det) < 1e-12:
        return np.full((len(px), 3), -1.0)
    w1 = ((y2 - y3) * (px - x3) + (x3 - x2) * (py - y3)) / det
    w2 = ((y3 - y1) * (px - x3) + (x1 - x3) * (py - y3)) / det
    return np.column_stack((w1, w2, 1 - w1 - w2))
