"""Point-radius georeferencing of a find known only by its trench (sieved finds): a centre and the radius that
covers the whole trench outline.

Method: Chapman, A.D. & Wieczorek, J.R. (2020) Georeferencing Best Practices. GBIF Secretariat, Copenhagen,
https://doi.org/10.15468/doc-gg7h-s853 (the point-radius method: the "corrected center" of a feature is the point
of the feature from which the greatest distance to any part of it - the "geographic radial" - is smallest, and that
distance is the extent's part of the coordinate uncertainty). For a polygon this is the centre of the smallest
circle enclosing its vertices when that centre lies inside it; when it does not (an L-shaped trench), the centre
is moved to the nearest point of the outline and the radius grows to cover every vertex again (our reading of the
guidelines' rule that the corrected center must lie within the feature).
"""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

__all__ = ["PointRadius", "point_radius", "smallest_circle"]

Pt = tuple[float, float]
PROTOCOL = ("point-radius: Chapman & Wieczorek (2020) Georeferencing Best Practices, GBIF, "
            "https://doi.org/10.15468/doc-gg7h-s853")


class PointRadius(NamedTuple):
    x: float
    y: float
    radius: float
    inside: bool  # the smallest circle's centre lay inside the outline (False: moved onto it)


def _circle2(a: Pt, b: Pt) -> tuple[float, float, float]:
    cx, cy = (a[0] + b[0]) / 2, (a[1] + b[1]) / 2
    return cx, cy, math.dist(a, (cx, cy))


def _circle3(a: Pt, b: Pt, c: Pt) -> tuple[float, float, float] | None:
    d = 2 * (a[0] * (b[1] - c[1]) + b[0] * (c[1] - a[1]) + c[0] * (a[1] - b[1]))
    if abs(d) < 1e-12:
        return None  # collinear
    ux = ((a[0] ** 2 + a[1] ** 2) * (b[1] - c[1]) + (b[0] ** 2 + b[1] ** 2) * (c[1] - a[1])
          + (c[0] ** 2 + c[1] ** 2) * (a[1] - b[1])) / d
    uy = ((a[0] ** 2 + a[1] ** 2) * (c[0] - b[0]) + (b[0] ** 2 + b[1] ** 2) * (a[0] - c[0])
          + (c[0] ** 2 + c[1] ** 2) * (b[0] - a[0])) / d
    return ux, uy, math.dist(a, (ux, uy))


def smallest_circle(points: Sequence[Pt]) -> tuple[float, float, float]:
    """Centre and radius of the smallest circle enclosing the points (the incremental algorithm of Welzl 1991,
    without the shuffle: outlines have a handful of vertices)."""
    pts = [(float(x), float(y)) for x, y in points]
    if not pts:
        raise ValueError("the smallest enclosing circle of no points is undefined; give the trench outline")
    eps = 1e-9

    def within(c: tuple[float, float, float], p: Pt) -> bool:
        return math.dist((c[0], c[1]), p) <= c[2] + eps

    c = (pts[0][0], pts[0][1], 0.0)
    for i, p in enumerate(pts):
        if within(c, p):
            continue
        c = (p[0], p[1], 0.0)
        for j, q in enumerate(pts[:i]):
            if within(c, q):
                continue
            c = _circle2(p, q)
            for r in pts[:j]:
                if not within(c, r):
                    c = _circle3(p, q, r) or max((_circle2(p, q), _circle2(p, r), _circle2(q, r)), key=lambda k: k[2])
    return c


def _inside(p: Pt, ring: Sequence[Pt]) -> bool:
    x, y, n, yes = p[0], p[1], len(ring), False
    for i in range(n):
        (x1, y1), (x2, y2) = ring[i], ring[(i + 1) % n]
        if (y1 > y) != (y2 > y) and x < x1 + (y - y1) * (x2 - x1) / (y2 - y1):
            yes = not yes
    return yes


def _nearest_on_ring(p: Pt, ring: Sequence[Pt]) -> Pt:
    best, best_d = ring[0], math.inf
    for i in range(len(ring)):
        (x1, y1), (x2, y2) = ring[i], ring[(i + 1) % len(ring)]
        dx, dy = x2 - x1, y2 - y1
        t = 0.0 if dx == dy == 0 else max(0.0, min(1.0, ((p[0] - x1) * dx + (p[1] - y1) * dy) / (dx * dx + dy * dy)))
        q = (x1 + t * dx, y1 + t * dy)
        if math.dist(p, q) < best_d:
            best, best_d = q, math.dist(p, q)
    return best


def point_radius(outline: Sequence[Pt]) -> PointRadius:
    """The point-radius georeference of an outline (metres in, metres out; any planar system)."""
    ring = [(float(x), float(y)) for x, y in outline]
    cx, cy, r = smallest_circle(ring)
    if len(ring) < 3 or _inside((cx, cy), ring):
        return PointRadius(cx, cy, r, True)
    x, y = _nearest_on_ring((cx, cy), ring)
    return PointRadius(x, y, max(math.dist((x, y), p) for p in ring), False)
