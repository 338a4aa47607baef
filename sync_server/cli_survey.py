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


@survey.command()
@click.argument("download", type=PATH)
@click.option("--setup", "setup_file", type=PATH, required=True,
              help="The setup the points were shot from (JSON, as for 'survey reduce'; \"station\" names the control "
                   "point occupied).")
@click.option("--by", "by", required=True, help="Your initials (2-4 capital letters), kept with every find moved.")
@click.option("--column", "columns", multiple=True, metavar="WHAT=HEADER",
              help="Which header holds what (point, hz, zenith, slope_distance, target_height, prism_constant_mm, "
                   "e, n, z), when the file's names differ, e.g. --column point=PtID (repeatable).")
@click.option("--template", "template_file", default=None, metavar="FILE|bks|csv",
              help="The download is instrument lines in this template, not a CSV with a header.")
@click.option("--angle-unit", type=click.Choice(["deg", "gon", "dms", "mil"]), default=None,
              help="Unit of the file's hz and zenith [default: the setup's].")
@click.option("--target-height", type=float, default=None,
              help="Pole height (m) for every point, when the file has no target_height column.")
@click.option("--prefix", default="", help="Text before the find number in a point id, e.g. F- for F-1012.")
@click.option("--max-move", type=float, default=0.10, show_default=True,
              help="A point that moves its find further than this (m) is refused unless --confirm-moves.")
@click.option("--confirm-moves", is_flag=True, help="Move finds further than --max-move too (you checked them).")
@click.option("--site", "site", default=None, help="Site code, when the store holds more than one.")
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
@FORMAT
def attach(download: Path, setup_file: Path, by: str, columns: tuple[str, ...], template_file: str | None,
           angle_unit: str | None, target_height: float | None, prefix: str, max_move: float, confirm_moves: bool,
           site: str | None, database_url: str | None, fmt: str) -> None:
    """Attach the day's download from the instrument to finds by number: each point becomes the find's shot
    (its line kept), its position recomputed from the setup; unmatched points and plotted finds without a point
    are listed, and validation runs again."""
    from schema.survey.templates import load_template, template_named

    from .cli_curation import _revalidate, _store
    from .survey_jobs import attach_job

    mapping = {}
    for pair in columns:
        what, sep, header = pair.partition("=")
        if not sep or not what.strip() or not header.strip():
            raise click.BadParameter(f"{pair!r} is not WHAT=HEADER; write e.g. point=PtID", param_hint="--column")
        mapping[what.strip()] = header.strip()
    template = None
    if template_file is not None:
        template = template_named(template_file) if template_file in ("bks", "csv") else load_template(template_file)
    with _store(database_url) as store:
        r = attach_job(store, download, setup_file, by=by, columns=mapping, template=template, angle_unit=angle_unit,
                       target_height_m=target_height, prefix=prefix, max_move_m=max_move,
                       confirm_moves=confirm_moves, site=site)
        checks = _revalidate(store, site, _POSITION_CHECKS) if r["attached"] else None
    r["checks"] = checks
    _emit(fmt, r, _attach_table(download, r))


_POSITION_CHECKS = ("POS_OUTSIDE_TRENCH", "POS_FAR_OUTSIDE", "POS_ABOVE_UNIT", "POS_BELOW_UNIT")


def _attach_table(download: Path, r: dict[str, Any]) -> list[str]:
    s = r["setup"]
    how = "over control point" if s["method"] == "occupied" else "free station"
    out = [f"setup: {how} {s['station']}, orientation {s['orientation']:.4f} {s['angle_unit']}"
           + (" (new)" if s["new"] else "")]
    n = len(r["attached"])
    out.append(f"attached {n} point{'' if n == 1 else 's'} of {download.name} to finds:")
    for m in r["attached"]:
        was = "no position before" if m["was"] is None else f"moved {m['moved_m']:.3f} m"
        out.append(f"  point {m['point']} -> find {m['find']}: E {m['e']:.4f}  N {m['n']:.4f}  Z {m['z']:.4f}  "
                   f"({m['kind']}; {was})")
    if r["already"]:
        out.append("already attached: " + ", ".join(f"find {m['find']}" for m in r["already"]))
    out.append(f"unmatched points: {len(r['unmatched'])}")
    out += [f"  line {u['line']} point {u['point']}: {u['why']}" for u in r["unmatched"]]
    nums = r["finds_without_point"]
    out.append(f"plotted finds without a position: {', '.join(map(str, nums)) if nums else 'none'}")
    if r["checks"]:
        out.append(r["checks"])
    return out
