"""The geometry of a trench section drawing: the trench's long axis, positions along it, surface profiles from
level points, and a vertical exaggeration to draw at. Plain functions over plain numbers (site grid metres)."""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

__all__ = ["Axis", "long_axis", "profile", "vertical_exaggeration"]

Pt = tuple[float, float]


class Axis(NamedTuple):
    """A line along the trench: from ``start`` in direction (ux, uy) for ``length`` metres; ``offset`` is the
    across-axis position of the line (the middle of the trench)."""

    x0: float
    y0: float
    ux: float
    uy: float
    length: float
    width: float
    bearing_deg: float  # grid bearing of the direction, clockwise from grid north

    def along(self, x: float, y: float) -> float:
        return (x - self.x0) * self.ux + (y - self.y0) * self.uy

    def across(self, x: float, y: float) -> float:
        return -(x - self.x0) * self.uy + (y - self.y0) * self.ux

    def point(self, d: float) -> Pt:
        return self.x0 + d * self.ux, self.y0 + d * self.uy


def long_axis(outline: Sequence[Pt]) -> Axis:
    """The long axis of the outline's minimum-area enclosing rectangle (its sides lie along an edge of the convex
    hull: Freeman & Shapira 1975, from memory), through the rectangle's middle, running from the end nearer grid
    west (or south, for a north-south trench) so sections read left to right like a plan."""
    pts = [(float(x), float(y)) for x, y in outline]
    if len(pts) < 2:
        raise ValueError("a trench outline needs at least two points to have a long axis")
    best: tuple[float, float, float, float, float, float, float] | None = None
    for i in range(len(pts)):
        (x1, y1), (x2, y2) = pts[i], pts[(i + 1) % len(pts)]
        n = math.hypot(x2 - x1, y2 - y1)
        if n == 0:
            continue
        ux, uy = (x2 - x1) / n, (y2 - y1) / n
        a = [x * ux + y * uy for x, y in pts]
        b = [-x * uy + y * ux for x, y in pts]
        area = (max(a) - min(a)) * (max(b) - min(b))
        if best is None or area < best[0] - 1e-9:
            best = (area, ux, uy, min(a), max(a), min(b), max(b))
    assert best is not None
    _area, ux, uy, a0, a1, b0, b1 = best
    if (b1 - b0) > (a1 - a0):  # the long side is across this edge: turn a quarter
        ux, uy, a0, a1, b0, b1 = -uy, ux, b0, b1, -a1, -a0
    if ux < -1e-9 or (abs(ux) <= 1e-9 and uy < 0):
        ux, uy, a0, a1, b0, b1 = -ux, -uy, -a1, -a0, -b1, -b0
    mid = (b0 + b1) / 2
    x0, y0 = a0 * ux - mid * uy, a0 * uy + mid * ux
    bearing = math.degrees(math.atan2(ux, uy)) % 360
    return Axis(x0, y0, ux, uy, a1 - a0, b1 - b0, bearing)


def profile(points: Sequence[tuple[float, float]], *, merge_m: float = 0.05) -> list[tuple[float, float]]:
    """A surface line from (distance, z) level points: sorted along the axis, points closer than ``merge_m``
    averaged (corners at the same end of a trench fall on one spot of the axis)."""
    out: list[list[float]] = []
    for d, z in sorted(points):
        if out and d - out[-1][0] / out[-1][2] <= merge_m:
            out[-1][0] += d
            out[-1][1] += z
            out[-1][2] += 1
        else:
            out.append([d, z, 1])
    return [(sd / k, sz / k) for sd, sz, k in out]


def vertical_exaggeration(length_m: float, depth_m: float, *, shape: float = 0.5) -> float:
    """The vertical exaggeration that makes a section about ``shape`` times as tall as it is long, rounded down
    to 1, 2, 2.5, 5 or 10 times a power of ten, and never below 1 (no compression)."""
    if depth_m <= 0 or length_m <= 0:
        return 1.0
    raw = shape * length_m / depth_m
    if raw <= 1:
        return 1.0
    p = 10 ** math.floor(math.log10(raw))
    return max(m * p for m in (1, 2, 2.5, 5, 10) if m * p <= raw)
