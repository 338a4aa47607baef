"""What the ``baulk survey`` commands do, as plain functions: read the files, call the survey engine, return
JSON-ready results. Kept apart from the click layer so scripts and tests can call them directly."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from schema import tabular
from schema.errors import InputFileInvalid, SurveyError, UnusableCRS
from schema.setup_file import crs_problem
from schema.survey import gnss, grid, polar, setup
from schema.survey.angles import FULL_CIRCLE
from schema.survey.crs import lonlat_to_projected

__all__ = ["fit_grid_job", "nmea_job", "reduce_job", "resect_job"]

SETUP_KEYS = ("e", "n", "z", "instrument_height", "orientation")


def reduce_job(setup_file: Path, shots_csv: Path, *, curvature: bool = False) -> list[dict[str, Any]]:
    station = _read_station(setup_file)
    rows = tabular.read_csv(
        shots_csv, required=("id", "hz", "zenith", "slope_distance", "target_height"),
        numeric=("hz", "zenith", "slope_distance", "target_height", "prism_constant_mm"),
        optional={"prism_constant_mm": 0.0}, unique=("id",),
    )
    col = lambda k: np.array([r[k] for r in rows], dtype=float)  # noqa: E731
    r = polar.reduce_shots(station, col("hz"), col("zenith"), col("slope_distance"), col("target_height"),
                           col("prism_constant_mm"), curvature_refraction=curvature)
    return [
        {"id": row["id"], "e": float(e), "n": float(n), "z": float(z), "hd": float(hd), "dh": float(dh)}
        for row, e, n, z, hd, dh in zip(rows, r.e, r.n, r.z, r.hd, r.dh)
    ]


def _read_station(setup_file: Path) -> polar.Station:
    """The station of a setup file (a JSON object), every value checked: a number that is finite, a known unit."""
    cfg, lines = tabular.json_key_lines(setup_file)
    missing = [k for k in SETUP_KEYS if k not in cfg] if isinstance(cfg, dict) else list(SETUP_KEYS)
    if missing:
        raise InputFileInvalid(
            f"{setup_file}: the setup needs {', '.join(SETUP_KEYS)} (and angle_unit 'deg' or 'gon'); "
            f"missing {', '.join(missing)}"
        )
    where = lambda key: f"{setup_file} line {lines[key]}" if key in lines else str(setup_file)  # noqa: E731
    unit = cfg.get("angle_unit", "deg")
    if unit not in FULL_CIRCLE:
        raise InputFileInvalid(f"{where('angle_unit')}: angle_unit {unit!r} is not known; use \"deg\" or \"gon\"")
    values = {}
    for key, what in polar.STATION_FIELDS.items():
        try:
            values[key] = polar.check_finite(key, cfg[key], f"give {what} as a JSON number")
        except SurveyError as exc:
            raise InputFileInvalid(f"{where(key)}: {exc}") from None
    return polar.Station(**values, angle_unit=unit)


def resect_job(
    control_csv: Path, observations_csv: Path, *, instrument_height: float, angle_unit: str, tolerance: float
) -> dict[str, Any]:
    control = {
        r["code"]: setup.KnownPoint(r["code"], r["e"], r["n"], r["z"])
        for r in tabular.read_csv(control_csv, required=("code", "e", "n"), numeric=("e", "n", "z"),
                                  optional={"z": None}, unique=("code",))
    }
    obs = []
    for r in tabular.read_csv(
        observations_csv, required=("code", "hz", "zenith", "slope_distance"),
        numeric=("hz", "zenith", "slope_distance", "target_height"), optional={"target_height": 0.0}, unique=("code",),
    ):
        if r["code"] not in control:
            raise InputFileInvalid(
                f"{observations_csv} line {r['_line']}: control point {r['code']!r} is not in {control_csv}; "
                "add its coordinates or correct the code"
            )
        obs.append(setup.ControlObservation(control[r["code"]], r["hz"], r["zenith"], r["slope_distance"], r["target_height"]))
    res = setup.resect(obs, instrument_height=instrument_height, angle_unit=angle_unit, tolerance_m=tolerance)
    return {
        "e": res.e, "n": res.n, "z": res.z, "orientation_deg": res.orientation_deg, "orientation": res.orientation,
        "angle_unit": res.angle_unit, "scale": res.scale, "scale_ppm": res.scale_ppm,
        "sd_e": res.sd_e, "sd_n": res.sd_n, "sd_z": res.sd_z, "residuals": res.residuals, "warnings": res.warnings,
    }


def fit_grid_job(pairs_csv: Path) -> dict[str, Any]:
    rows = tabular.read_csv(
        pairs_csv, required=("code", "x", "y", "e", "n"), numeric=("x", "y", "e", "n", "z_grid", "z_crs"),
        optional={"z_grid": None, "z_crs": None}, unique=("code",),
    )
    fit = grid.fit_grid([grid.PointPair(r["code"], r["x"], r["y"], r["e"], r["n"], r["z_grid"], r["z_crs"]) for r in rows])
    return {
        "rotation_deg": fit.rotation_deg, "scale": fit.scale, "e0": fit.tx, "n0": fit.ty,
        "vertical_offset_m": fit.vertical_offset_m, "residuals": fit.residuals, "sigma0_m": fit.sigma0_m,
        "warnings": fit.warnings, "transform": fit.as_grid_transform(),
    }


def nmea_job(log: Path, *, epsg: int | None = None) -> dict[str, Any]:
    if epsg is not None and (why := crs_problem(epsg)):
        raise UnusableCRS(f"--epsg {epsg}: {why}")
    lines = tabular.read_text(log, kind="NMEA").splitlines()
    if not any(line.strip().startswith("$") for line in lines):
        what = "the file is empty" if not any(line.strip() for line in lines) else (
            f"none of its {len(lines)} lines starts with $ as a sentence does, e.g. $GNGGA,...")
        raise InputFileInvalid(f"{log}: no NMEA sentence was found ({what}); give the receiver's log of NMEA 0183 "
                               "sentences (GGA, RMC, GST), copied as plain text")
    parsed = gnss.parse_nmea(lines)
    fixes = []
    for f in parsed.fixes:
        item: dict[str, Any] = {
            "time": f.fixed_at.isoformat() if f.fixed_at else f.time.isoformat(), "lat": f.lat, "lon": f.lon,
            "h": f.ellipsoidal_height_m, "orthometric_h": f.orthometric_height_m, "quality": f.quality,
            "quality_name": f.quality_name, "hdop": f.hdop, "sigma_lat_m": f.sigma_lat_m,
            "sigma_lon_m": f.sigma_lon_m, "sigma_alt_m": f.sigma_alt_m, "plot_ok": gnss.accept_for_plot(f).accepted,
            "lines": f.lines,
        }
        fixes.append(item)
    if epsg is not None and fixes:
        e, n = lonlat_to_projected([f["lon"] for f in fixes], [f["lat"] for f in fixes], epsg)
        for f, ee, nn in zip(fixes, np.atleast_1d(e), np.atleast_1d(n)):
            f["e"], f["n"] = float(ee), float(nn)
    return {
        "fixes": fixes,
        "rejected": [{"line": r.line, "text": r.text, "reason": r.reason} for r in parsed.rejected],
        "ignored_sentences": parsed.ignored,
    }
