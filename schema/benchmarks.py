"""Benchmarks of the shared core for ``baulk bench``."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from .benchkit import Bench, benchmark
from .survey.polar import Station, reduce_shots


def _setup_reduce(size: int, _work: Path) -> dict[str, Any]:
    import pyproj

    rng = np.random.default_rng(1)
    return {
        "station": Station(1000.0, 2000.0, 100.0, 1.55, 37.5),
        "hz": rng.uniform(0, 360, size), "zen": rng.uniform(80, 100, size),
        "sd": rng.uniform(1, 80, size), "th": np.full(size, 1.3),
        "lon": rng.uniform(34.9, 35.1, size), "lat": rng.uniform(-1.2, -1.0, size),
        "proj": pyproj.Transformer.from_crs(4326, 32736, always_xy=True),
    }


def _reduce(state: dict[str, Any], _work: Path, _i: int) -> None:
    reduce_shots(state["station"], state["hz"], state["zen"], state["sd"], state["th"])


def _proj(state: dict[str, Any], _work: Path, _i: int) -> None:
    state["proj"].transform(state["lon"], state["lat"])


benchmark(Bench(
    name="survey.reduce",
    baseline_name="pyproj WGS84->UTM 36S, same n",
    sizes=(100_000, 1_000_000),
    setup=_setup_reduce,
    subject=_reduce,
    baseline=_proj,
    repeats=5,
    doc="polar reduction of n total-station shots (numpy) vs pyproj transforming n points; goal ratio <= 1.0",
))
