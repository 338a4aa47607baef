"""``baulk survey ...``: the survey engine for data managers, CSV or JSON in, a table or JSON out."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click

__all__ = ["survey"]

FORMAT = click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True,
                      help="Output as a readable table or as JSON for scripts.")
PATH = click.Path(exists=True, dir_okay=False, path_type=Path)


def _emit(fmt: str, data: Any, table: list[str]) -> None:
    if fmt == "json":
        click.echo(json.dumps(data, indent=2))
    else:
        click.echo("\n".join(table))


@click.group()
def survey() -> None:
    """Reduce shots, free-station, fit the site grid and read GNSS logs (scriptable, --format json)."""


@survey.command()
@click.argument("setup_file", type=PATH)
@click.argument("shots_csv", type=PATH)
@click.option("--curvature", is_flag=True, help="Apply earth curvature and refraction (k = 0.13).")
@FORMAT
def reduce(setup_file: Path, shots_csv: Path, curvature: bool, fmt: str) -> None:
    """Shots (CSV: id,hz,zenith,slope_distance,target_height[,prism_constant_mm]) from a setup (JSON) -> points."""
    from .survey_jobs import reduce_job

    points = reduce_job(setup_file, shots_csv, curvature=curvature)
    table = [f"{'id':<12} {'e':>12} {'n':>13} {'z':>9}"] + [
        f"{p['id']:<12} {p['e']:12.4f} {p['n']:13.4f} {p['z']:9.4f}" for p in points
    ]
    _emit(fmt, points, table)


@survey.command()
@click.argument("control_csv", type=PATH)
@click.argument("observations_csv", type=PATH)
@click.option("--instrument-height", type=float, required=True, help="Instrument height above the ground mark (m).")
@click.option("--angle-unit", type=click.Choice(["deg", "gon"]), default="deg", show_default=True,
              help="Unit of the hz and zenith readings.")
@click.option("--tolerance", type=float, default=0.01, show_default=True,
              help="Largest residual accepted at any control point (m); a worse setup is refused.")
@FORMAT
def resect(control_csv: Path, observations_csv: Path, instrument_height: float, angle_unit: str, tolerance: float,
           fmt: str) -> None:
    """Free station from control points (CSV: code,e,n[,z]) and readings (CSV: code,hz,zenith,slope_distance[,target_height])."""
    from .survey_jobs import resect_job

    r = resect_job(control_csv, observations_csv, instrument_height=instrument_height, angle_unit=angle_unit,
                   tolerance=tolerance)
    table = [
        f"station  E {r['e']:.4f}  N {r['n']:.4f}  Z {'-' if r['z'] is None else format(r['z'], '.4f')}",
        f"orientation {r['orientation_deg']:.6f} deg   scale {r['scale']:.8f} ({r['scale_ppm']:+.1f} ppm)",
        "residuals (m):",
        *(f"  {x['point']:<8} dE {x['de']:+.4f}  dN {x['dn']:+.4f}  d {x['d']:.4f}" for x in r["residuals"]),
        *(f"warning: {w}" for w in r["warnings"]),
    ]
    _emit(fmt, r, table)


@survey.command("fit-grid")
@click.argument("pairs_csv", type=PATH)
@FORMAT
def fit_grid(pairs_csv: Path, fmt: str) -> None:
    """Site grid -> CRS similarity from control points in both systems (CSV: code,x,y,e,n[,z_grid,z_crs])."""
    from .survey_jobs import fit_grid_job

    r = fit_grid_job(pairs_csv)
    table = [
        f"rotation {r['rotation_deg']:.8f} deg  scale {r['scale']:.9f}  origin E {r['e0']:.4f}  N {r['n0']:.4f}",
        *([f"vertical offset {r['vertical_offset_m']:+.4f} m"] if r["vertical_offset_m"] is not None else []),
        "residuals (m):",
        *(f"  {x['point']:<8} dE {x['de']:+.4f}  dN {x['dn']:+.4f}  d {x['d']:.4f}" for x in r["residuals"]),
        *(f"warning: {w}" for w in r["warnings"]),
    ]
    _emit(fmt, r, table)


@survey.command()
@click.argument("log", type=PATH)
@click.option("--epsg", type=int, default=None, help="Also give E, N in this projected CRS (e.g. 32736).")
@FORMAT
def nmea(log: Path, epsg: int | None, fmt: str) -> None:
    """Read an NMEA 0183 log (GGA, RMC, GST): fixes with quality and sigmas, and every rejected line with why."""
    from .survey_jobs import nmea_job

    r = nmea_job(log, epsg=epsg)
    table = [f"{len(r['fixes'])} fixes, {len(r['rejected'])} rejected lines"] + [
        f"  {f['time']}  lat {f['lat']:.8f}  lon {f['lon']:.8f}  h {f['h'] if f['h'] is None else format(f['h'], '.3f')}"
        f"  q{f['quality']} ({f['quality_name']})"
        + (f"  E {f['e']:.3f}  N {f['n']:.3f}" if f.get("e") is not None else "")
        for f in r["fixes"]
    ] + [f"  line {x['line']}: {x['reason']}" for x in r["rejected"]]
    _emit(fmt, r, table)
