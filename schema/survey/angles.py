"""Angles in degrees or gon (400 gon to the circle), as the instrument reads them."""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["FULL_CIRCLE", "circular_mean", "from_rad", "signed", "to_rad", "wrap"]

AngleUnit = Literal["deg", "gon"]
FULL_CIRCLE: dict[str, float] = {"deg": 360.0, "gon": 400.0}


def _full(unit: str) -> float:
    try:
        return FULL_CIRCLE[unit]
    except KeyError:
        raise ValueError(f"angle unit {unit!r} is not 'deg' or 'gon'") from None


def to_rad(value: ArrayLike, unit: str) -> NDArray[np.float64]:
    return np.asarray(value, dtype=float) * (2 * math.pi / _full(unit))


def from_rad(value: ArrayLike, unit: str) -> NDArray[np.float64]:
    return np.asarray(value, dtype=float) * (_full(unit) / (2 * math.pi))


def wrap(value: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Into [0, full circle)."""
    full = _full(unit)
    out = np.mod(np.asarray(value, dtype=float), full)
    return np.where(out >= full, out - full, out)


def signed(value: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Into [-half, +half): the signed difference form of an angle."""
    full = _full(unit)
    return np.mod(np.asarray(value, dtype=float) + full / 2, full) - full / 2


def circular_mean(values: ArrayLike, unit: str) -> float:
    """Mean direction of angles (so 359 deg and 1 deg average to 0, not 180)."""
    r = to_rad(values, unit)
    mean = math.atan2(float(np.sin(r).mean()), float(np.cos(r).mean()))
    return float(wrap(from_rad(mean, unit), unit))
