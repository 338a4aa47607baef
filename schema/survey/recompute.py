"""Recompute coordinates from kept raw observations after a setup is corrected (one call)."""

from __future__ import annotations

import uuid

import numpy as np

from ..records import Shot, StationSetup
from .polar import Station, reduce_shots

__all__ = ["shot_positions", "station_of"]


def station_of(setup: StationSetup) -> Station:
    return Station(setup.e, setup.n, setup.z, setup.instrument_height_m, setup.orientation, setup.angle_unit)


def shot_positions(
    setup: StationSetup, shots: list[Shot], *, curvature_refraction: bool = False
) -> dict[uuid.UUID, tuple[float, float, float]]:
    """Grid E, N, Z of each shot of ``setup``, keyed by shot id."""
    if not shots:
        return {}
    foreign = [s.id for s in shots if s.setup_id != setup.id]
    if foreign:
        raise ValueError(f"shots {foreign} belong to another setup; pass only the shots of setup {setup.id}")
    r = reduce_shots(
        station_of(setup),
        np.array([s.hz for s in shots]), np.array([s.zenith for s in shots]),
        np.array([s.slope_distance_m for s in shots]), np.array([s.target_height_m for s in shots]),
        np.array([s.prism_constant_mm for s in shots]), curvature_refraction=curvature_refraction,
    )
    return {s.id: (float(e), float(n), float(z)) for s, e, n, z in zip(shots, r.e, r.n, r.z)}
