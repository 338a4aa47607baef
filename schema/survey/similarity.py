"""Least-squares 2D similarity (Helmert) transformation between two sets of points.

    dst = t + [[a, -b], [b, a]] @ src        scale = hypot(a, b), rotation = atan2(b, a) (counterclockwise)

Solved in closed form on coordinates centred on their means (which keeps the normal equations well
conditioned with large CRS coordinates). Standard deviations come from the a-posteriori variance factor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import WeakGeometry

__all__ = ["Similarity", "fit_similarity"]

F = NDArray[np.float64]


@dataclass(frozen=True)
class Similarity:
    a: float
    b: float
    tx: float
    ty: float
    residuals: F  # (n, 2): observed dst minus transformed src
    sigma0: float | None  # a-posteriori standard deviation of unit weight (m); None without redundancy
    sd_t: tuple[float, float] | None  # standard deviations of tx, ty (m)

    @property
    def scale(self) -> float:
        return math.hypot(self.a, self.b)

    @property
    def rotation_rad(self) -> float:
        return math.atan2(self.b, self.a)

    @property
    def redundancy(self) -> int:
        return 2 * len(self.residuals) - 4

    def apply(self, xy: ArrayLike) -> F:
        p = np.asarray(xy, dtype=float).reshape(-1, 2)
        return np.column_stack((self.tx + self.a * p[:, 0] - self.b * p[:, 1], self.ty + self.b * p[:, 0] + self.a * p[:, 1]))

    def invert(self, xy: ArrayLike) -> F:
        p = np.asarray(xy, dtype=float).reshape(-1, 2) - (self.tx, self.ty)
        d = self.a**2 + self.b**2
        return np.column_stack(((self.a * p[:, 0] + self.b * p[:, 1]) / d, (-self.b * p[:, 0] + self.a * p[:, 1]) / d))


def check_geometry(points: F, labels: list[str], what: str) -> None:
    """Refuse duplicated or coincident points, and three or more points on one line."""
    for i in range(len(points)):
        for j in range(i + 1, len(points)):
            if labels[i] == labels[j]:
                raise WeakGeometry(f"{what} {labels[i]} is listed twice; give each point once")
            if np.hypot(*(points[i] - points[j])) < 1e-3:
                raise WeakGeometry(
                    f"{what}s {labels[i]} and {labels[j]} coincide (less than 1 mm apart); use two distinct points"
                )
    if len(points) >= 3:
        centred = points - points.mean(axis=0)
        sv = np.linalg.svd(centred, compute_uv=False)
        if sv[1] < 1e-3 * sv[0]:
            raise WeakGeometry(
                f"{what}s {', '.join(labels)} lie on one line; add a point well off that line"
            )


def fit_similarity(src: ArrayLike, dst: ArrayLike) -> Similarity:
    """Fit dst ~ similarity(src) by least squares; needs two or more point pairs."""
    s = np.asarray(src, dtype=float).reshape(-1, 2)
    d = np.asarray(dst, dtype=float).reshape(-1, 2)
    if len(s) != len(d) or len(s) < 2:
        raise WeakGeometry(f"a similarity needs at least two point pairs; {len(s)} given")
    sm, dm = s.mean(axis=0), d.mean(axis=0)
    sc, dc = s - sm, d - dm
    r2 = float((sc**2).sum())
    if r2 < 1e-12:
        raise WeakGeometry("the source points coincide; use points spread over the area")
    a = float((sc[:, 0] * dc[:, 0] + sc[:, 1] * dc[:, 1]).sum()) / r2
    b = float((sc[:, 0] * dc[:, 1] - sc[:, 1] * dc[:, 0]).sum()) / r2
    tx = float(dm[0] - a * sm[0] + b * sm[1])
    ty = float(dm[1] - b * sm[0] - a * sm[1])
    model = Similarity(a, b, tx, ty, np.zeros((len(s), 2)), None, None)
    res = d - model.apply(s)
    dof = 2 * len(s) - 4
    sigma0 = sd_t = None
    if dof > 0:
        sigma0 = math.sqrt(float((res**2).sum()) / dof)
        # design matrix rows for (tx, ty, a, b): x-row [1, 0, x, -y], y-row [0, 1, y, x]
        A = np.zeros((2 * len(s), 4))
        A[0::2, 0], A[1::2, 1] = 1.0, 1.0
        A[0::2, 2], A[0::2, 3] = s[:, 0], -s[:, 1]
        A[1::2, 2], A[1::2, 3] = s[:, 1], s[:, 0]
        cov = sigma0**2 * np.linalg.inv(A.T @ A)
        sd_t = (math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1]))
    return Similarity(a, b, tx, ty, res, sigma0, sd_t)
