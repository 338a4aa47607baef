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

__all__ = ["attach_job", "fit_grid_job", "nmea_job", "reduce_job", "resect_job"]

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


# -- the day's download (baulk survey attach) -------------------------------------------------------------------
def attach_job(
    store: Any, download: Path, setup_file: Path, *, by: str, columns: dict[str, str] | None = None,
    template: Any = None, angle_unit: str | None = None, target_height_m: float | None = None, prefix: str = "",
    max_move_m: float = 0.10, confirm_moves: bool = False, site: str | None = None, now: Any = None,
) -> dict[str, Any]:
    """Attach the points of an instrument download to finds by number, in one transaction of the server's own
    device: each raw point becomes the find's shot (the point's line kept as its raw line) and the find's
    position is what the setup reduces it to; a reduced point gives the find the instrument's E, N, Z exactly
    and its line goes into the notes (see ``schema/survey/download.py``); a ``Correction`` keeps who and why. Moves past ``max_move_m`` are refused
    (``MoveNotConfirmed``, nothing written) unless ``confirm_moves``."""
    import datetime as dt

    from schema import db
    from schema.errors import MoveNotConfirmed, RecordInvalid
    from schema.records import Correction, Find, Shot
    from schema.survey import download as dl
    from schema.validation import check

    from .curation import _site

    if not (by or "").strip():
        raise InputFileInvalid("--by: give your initials (kept with every find the download moves)")
    if max_move_m < 0 or not np.isfinite(max_move_m):
        raise InputFileInvalid(f"--max-move {max_move_m}: give a distance in metres, 0 or more")
    station = _read_station(setup_file)
    cfg, _lines = tabular.json_key_lines(setup_file)
    code = str(cfg.get("station") or "DL").strip()
    text = tabular.read_text(download)
    if template is not None:
        points = dl.read_download_lines(text, source=str(download), template=template, setup_unit=station.angle_unit)
    else:
        points = dl.read_download_csv(text, source=str(download), setup_unit=station.angle_unit, columns=columns,
                                      angle_unit=angle_unit, target_height_m=target_height_m)
    now = now or dt.datetime.now(dt.timezone.utc)
    with store.atomic() as conn:
        s = _site(conn, site)
        finds = list(db.select(conn, Find, site_id=s.id))
        numbers = {dl.find_number(p.point, prefix) for p in points}
        held_lines = {f.id: db.get(conn, Shot, f.shot_id).raw_line for f in finds  # only the points' finds' shots
                      if f.number in numbers and f.shot_id is not None}
        plan = dl.plan_attach(points, finds, station, prefix=prefix, max_move_m=max_move_m,
                              confirm_moves=confirm_moves, held_lines=held_lines)
        if plan.held:
            moves = "; ".join(f"find {m.number} by {m.move_m:.3f} m (point {m.point.point}, line {m.point.line})"
                              for m in plan.held)
            raise MoveNotConfirmed(
                f"{len(plan.held)} point{'s' if len(plan.held) > 1 else ''} of {download.name} would move "
                f"{'their finds' if len(plan.held) > 1 else 'its find'} further than {max_move_m:g} m: {moves}; "
                "nothing was written. Check those points (the right find number? the right setup?), then run again "
                "with --confirm-moves to move them, or with a larger --max-move")
        todo = [m for m in plan.matches if not m.same]
        shots_todo = any(m.point.kind == "raw" for m in todo)  # reduced points keep no shot, so no setup
        setup, setup_new = _download_setup(conn, s, station, code, by=by.strip(), at=now)
        if shots_todo and setup_new:
            store.save_versioned(conn, setup, new=True)
        find_by_id = {f.id: f for f in finds}
        for m in todo:
            current = find_by_id[m.find_id]
            shot = None
            if m.point.kind == "raw":
                shot = check(Shot, {"setup_id": setup.id, "hz": m.hz, "zenith": m.zenith, "slope_distance_m":
                                    m.slope_distance_m, "target_height_m": m.point.target_height_m,
                                    "prism_constant_mm": m.point.prism_constant_mm, "shot_at": now,
                                    "raw_line": m.point.raw_line[:1000]}, record=f"point {m.point.point}")
                changes = {"e": m.e, "n": m.n, "z": m.z, "position_source": "total_station", "shot_id": shot.id,
                           "gnss_fix_id": None, "position_sigma_m": current.position_sigma_m or dl.REDUCED_SIGMA_M}
            else:  # the instrument's own E, N, Z: no shot to keep, the line goes into the notes (download.py)
                changes = dl.reduced_changes(m.point, m.e, m.n, m.z, notes=current.notes,  # type: ignore[arg-type]
                                             source=download.name)
            try:
                updated = check(Find, {**current.model_dump(), **changes}, record=f"find {m.number}")
            except RecordInvalid as exc:
                raise RecordInvalid(f"find {m.number} (point {m.point.point}, line {m.point.line})", exc.problems) from None
            changed = [k for k in ("e", "n", "z", "position_source", "shot_id", "gnss_fix_id", "notes")
                       if getattr(updated, k) != getattr(current, k)]
            note = check(Correction, {
                "record": "find", "record_id": current.id, "fields": ",".join(changed),
                "reason": f"point {m.point.point} of {download.name} " + (
                    f"(raw, setup {setup.station_code})" if shot is not None else "(reduced by the instrument)"),
                "by": by.strip(), "at": now}, record="correction")
            if shot is not None:
                store.save_versioned(conn, shot, new=True)
            store.save_versioned(conn, updated, new=False)
            store.save_versioned(conn, note, new=True)
    return {
        "site": s.code,
        "setup": {"station": setup.station_code, "method": setup.method, "orientation": setup.orientation,
                  "angle_unit": setup.angle_unit, "new": shots_todo and setup_new},
        "attached": [_match_json(m) for m in todo],
        "already": [_match_json(m) for m in plan.matches if m.same],
        "unmatched": [{"point": p.point, "line": p.line, "why": why} for p, why in plan.unmatched],
        "finds_without_point": plan.finds_without_point,
    }


def _match_json(m: Any) -> dict[str, Any]:
    return {"point": m.point.point, "line": m.point.line, "kind": m.point.kind, "find": m.number,
            "e": m.e, "n": m.n, "z": m.z, "was": list(m.was) if m.was else None, "moved_m": m.move_m}


def _download_setup(conn: Any, site: Any, station: polar.Station, code: str, *, by: str, at: Any) -> tuple[Any, bool]:
    """The setup the download was shot from: one already held with the same station, heights and orientation,
    else a new one (over the control point ``station`` names, else a free station)."""
    from schema import db
    from schema.records import ControlPoint, StationSetup
    from schema.validation import check

    for held in db.select(conn, StationSetup, site_id=site.id, station_code=code):
        if (held.e, held.n, held.z, held.instrument_height_m, held.orientation, held.angle_unit) == (
                station.e, station.n, station.z, station.instrument_height, station.orientation, station.angle_unit):
            return held, False
    cp = next(iter(db.select(conn, ControlPoint, site_id=site.id, code=code)), None)
    setup = check(StationSetup, {
        "site_id": site.id, "method": "occupied" if cp else "resection", "occupied_point_id": cp.id if cp else None,
        "station_code": code, "e": station.e, "n": station.n, "z": station.z,
        "instrument_height_m": station.instrument_height, "angle_unit": station.angle_unit,
        "orientation": station.orientation, "set_up_at": at, "recorder": by,
        "residuals": [{"source": "instrument download", "note": "set up on the instrument"}],
    }, record="setup")
    return setup, True
