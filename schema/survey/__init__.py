"""Survey engine: pure functions from raw observations to site-grid coordinates with a stated quality.

- ``polar``: total-station shots -> E, N, Z (vectorised), optional curvature and refraction
- ``setup``: orientation by backsights; free-station resection by least squares
- ``similarity``: the 2D Helmert fit both of those and the site grid use
- ``grid``: site grid <-> CRS, the grid fit, and the PROJ-free polynomial fallback
- ``crs``: pyproj behind functions (absent on some tablet builds)
- ``gnss``: NMEA 0183 GGA/RMC/GST -> fixes; the RTK-fixed rule for piece-plots
- ``recompute``: coordinates again from kept shots after a setup is corrected
- ``templates``: instrument line templates (delimited, fixed-width, word-indexed): decode and encode lines
- ``download``: the instrument's own download matched to finds by number (``plan_attach``)
"""

from __future__ import annotations

from .angles import circular_mean
from .gnss import Fix, accept_for_plot, parse_nmea
from .grid import GridFit, GridPolynomial, PointPair, eval_grid_polynomial, fit_grid, fit_grid_polynomial, latlon_to_grid
from .polar import Reduced, Station, reduce_shots
from .recompute import shot_positions
from .setup import Backsight, ControlObservation, KnownPoint, orient_by_backsights, resect

__all__ = [
    "Backsight", "ControlObservation", "Fix", "GridFit", "GridPolynomial", "KnownPoint", "PointPair", "Reduced",
    "Station", "accept_for_plot", "circular_mean", "eval_grid_polynomial", "fit_grid", "fit_grid_polynomial",
    "latlon_to_grid", "orient_by_backsights", "parse_nmea", "reduce_shots", "resect", "shot_positions",
]
