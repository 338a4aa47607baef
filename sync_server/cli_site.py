"""``baulk site`` and ``baulk season open/close``: set a real site up and keep its set-up right.

Each command parses its options, calls one function of ``sync_server.site_setup`` and prints what was written.
``baulk site init`` is, with ``baulk serve``, the only command that creates a server store; it checks the whole
set-up file before it creates or writes anything.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path
from typing import Any

import click

__all__ = ["season_open", "season_close", "site"]

_db_option = click.option("--db", "database_url", default=None,
                          help="Server database URL [default: the server's SQLite file].")
_accept_option = click.option("--accept-residuals", is_flag=True,
                              help="Write the set-up even when the grid fit's largest residual is over the site's "
                                   "grid_tolerance_m (after checking the points).")


def _store(database_url: str | None) -> Any:
    from .cli import _server_store

    return _server_store(database_url)


def _revalidate(store: Any) -> None:
    """Every check runs again after a set-up change (a moved outline or a refitted grid changes what they say)."""
    from .validation import run_validation

    run_validation(store)


def _grid_lines(grid: dict[str, Any] | None) -> list[str]:
    if grid is None:
        return ["site grid: not fitted (fewer than two control points known in both systems)"]
    lines = [f"site grid: rotation {grid['rotation_deg']:.6f} deg, scale {grid['scale']:.9f}"
             + (f", largest residual {grid['max_residual_m']:.4f} m" if "max_residual_m" in grid else "")]
    for r in grid.get("residuals", []):
        lines.append(f"  {r['point']:<8} dE {r['de']:+.4f}  dN {r['dn']:+.4f}  d {r['d']:.4f} m")
    if grid.get("polynomial_max_error_m") is not None:
        lines.append(f"tablet polynomial (no PROJ needed): worst error {grid['polynomial_max_error_m'] * 1000:.4f} mm")
    return lines


@click.group()
def site() -> None:
    """Set the site up from a set-up file, show it, and add or correct control points and trenches."""


@site.command("init")
@click.argument("setup", type=click.Path(dir_okay=False, path_type=Path))
@_db_option
@_accept_option
def site_init(setup: Path, database_url: str | None, accept_residuals: bool) -> None:
    """Check a site set-up file (TOML) whole, then create the store and write the site, its first season, control
    points and trenches in one transaction; tablets receive them at their first sync."""
    from schema.setup_file import read_setup

    from .settings import ServerSettings
    from .site_setup import init_site
    from .store import ServerStore

    plan = read_setup(setup, accept_residuals=accept_residuals)  # before any store is created
    url = database_url or ServerSettings().database_url
    with ServerStore.open(url, create=True) as store:
        r = init_site(store, plan)
    click.echo(f"site {r['site']} ({r['name']}) set up in {_redact(url)}: EPSG:{r['crs_epsg']}, season {r['season']}, "
               f"{r['control_points']} control points, trenches {', '.join(r['trenches'])}")
    for line in _grid_lines(r["grid"]) + [f"warning: {w}" for w in r["warnings"]]:
        click.echo(line)
    click.echo("next: baulk serve --db ... then baulk device add --role recorder --label TAB-1")


def _redact(url: str) -> str:
    from .cli import _redact as redact

    return redact(url)


@site.command("show")
@_db_option
@click.option("--json", "as_json", is_flag=True, help="Print the set-up as one JSON object.")
def site_show(database_url: str | None, as_json: bool) -> None:
    """Show the site's set-up: settings, seasons, control points with grid residuals, trenches, horizons."""
    from .site_setup import site_summary

    with _store(database_url) as store:
        s = site_summary(store)
    site_ = s["site"]
    if as_json:
        out = {**s, "site": site_.model_dump(mode="json", exclude={"grid_polynomial"}),
               "seasons": [x.model_dump(mode="json") for x in s["seasons"]],
               "horizons": [x.model_dump(mode="json") for x in s["horizons"]]}
        click.echo(json.dumps(out, indent=2, default=str))
        return
    click.echo(f"site {site_.code}: {site_.name}")
    click.echo(f"CRS EPSG:{site_.crs_epsg}" + (f" ({s['crs_name']})" if s["crs_name"] else "")
               + f"; time zone {site_.timezone}; country {site_.country_code or '-'}")
    click.echo(f"Z tolerance {site_.z_tolerance_m:g} m; shoring check from {site_.shoring_check_depth_m:g} m deep; "
               f"find-number blocks of {site_.number_block_size}; grid tolerance {site_.grid_tolerance_m:g} m")
    click.echo("seasons: " + (", ".join(f"{x.label} ({x.starts_on} to {x.ends_on or 'open'})" for x in s["seasons"])
                              or "none"))
    for line in _grid_lines(s["grid"]):
        click.echo(line)
    click.echo(f"control points ({len(s['control_points'])}):")
    for cp in s["control_points"]:
        crs = f"  CRS E {cp['crs_e']:.3f} N {cp['crs_n']:.3f}" if cp["crs_e"] is not None else ""
        res = f"  residual {cp['residual_m']:.4f} m" if cp["residual_m"] is not None else ""
        click.echo(f"  {cp['code']:<8} E {cp['e']:.3f} N {cp['n']:.3f} Z {cp['z']:.3f}{crs}{res}")
    click.echo(f"trenches ({len(s['trenches'])}):")
    for t in s["trenches"]:
        click.echo(f"  {t['code']:<8} {len(t['outline'])} corners, {t['area_m2']:.2f} m2")
    click.echo("horizons: " + (", ".join(f"{h.order}. {h.code} {h.label}" for h in s["horizons"]) or
                               "none yet (baulk horizon add)"))


@site.command("control-point")
@click.argument("code")
@click.option("--e", "e", type=float, required=True, help="Grid easting (m).")
@click.option("--n", "n", type=float, required=True, help="Grid northing (m).")
@click.option("--z", "z", type=float, required=True, help="Height on the site datum (m).")
@click.option("--crs-e", type=float, default=None, help="Easting in the site's projected CRS (m), to fit the grid.")
@click.option("--crs-n", type=float, default=None, help="Northing in the site's projected CRS (m), to fit the grid.")
@_db_option
@_accept_option
def site_control_point(code: str, e: float, n: float, z: float, crs_e: float | None, crs_n: float | None,
                       database_url: str | None, accept_residuals: bool) -> None:
    """Add a control point or correct one; the site grid is refitted and the change shown."""
    from .site_setup import set_control_point

    with _store(database_url) as store:
        r = set_control_point(store, code=code, e=e, n=n, z=z, crs_e=crs_e, crs_n=crs_n,
                              accept_residuals=accept_residuals)
        _revalidate(store)
    click.echo(f"control point {code} {'added' if r['added'] else 'corrected'}")
    if not r["refitted"]:
        click.echo("site grid unchanged (the point's CRS coordinates did not change)")
        return
    click.echo("before: " + (_grid_lines(r["before"])[0] if r["before"] else "no site grid"))
    for line in ["after:  " + _grid_lines(r["after"])[0], *_grid_lines(r["after"])[1:]]:
        click.echo(line)
    for w in r["warnings"]:
        click.echo(f"warning: {w}")


def _outline(text: str) -> list[Any]:
    """'E,N E,N ...' or 'CP1 CP2 CP3' (spaces or semicolons between corners)."""
    out: list[Any] = []
    for token in text.replace(";", " ").split():
        if "," in token:
            try:
                e, n = (float(v) for v in token.split(","))
            except ValueError:
                raise click.BadParameter(f"corner {token!r} is not E,N in metres, e.g. 502.5,1004", param_hint="--outline")
            out.append([e, n])
        else:
            out.append(token)
    return out


@site.command("trench")
@click.argument("code")
@click.option("--outline", required=True,
              help="Corners in order: 'E,N E,N E,N ...' in grid metres, or control-point codes 'CP1 CP2 CP3'.")
@click.option("--season", default=None, help="Mark the trench opened in this season [default: the newest].")
@_db_option
def site_trench(code: str, outline: str, season: str | None, database_url: str | None) -> None:
    """Add a trench or change its outline (checked: a simple polygon that overlaps no other trench)."""
    from .site_setup import set_trench

    with _store(database_url) as store:
        r = set_trench(store, code=code, outline=_outline(outline), season=season)
        _revalidate(store)
    click.echo(f"trench {r['trench']} {'added' if r['added'] else 'outline changed'}: {r['corners']} corners, "
               f"{r['area_m2']:.2f} m2")


def _date(value: str, name: str) -> dt.date:
    try:
        return dt.date.fromisoformat(value)
    except ValueError:
        raise click.BadParameter(f"{value!r} is not a date; write YYYY-MM-DD, e.g. 2027-06-14", param_hint=name) from None


@click.command("open")
@click.argument("label")
@click.option("--starts", required=True, help="First day of the season (YYYY-MM-DD).")
@click.option("--ends", default=None, help="Last day, if already known (YYYY-MM-DD).")
@_db_option
def season_open(label: str, starts: str, ends: str | None, database_url: str | None) -> None:
    """Open a new field season: units and find numbering carry on from the earlier ones."""
    from .site_setup import open_season

    with _store(database_url) as store:
        s = open_season(store, label=label, starts_on=_date(starts, "--starts"),
                        ends_on=_date(ends, "--ends") if ends else None)
        _revalidate(store)
    click.echo(f"season {s.label} opened on {s.starts_on}" + (f", ends {s.ends_on}" if s.ends_on else ""))


@click.command("close")
@click.argument("label")
@click.option("--ends", required=True, help="Last day of the season (YYYY-MM-DD).")
@_db_option
def season_close(label: str, ends: str, database_url: str | None) -> None:
    """Close a field season on its last day."""
    from .site_setup import close_season

    with _store(database_url) as store:
        s = close_season(store, label=label, ends_on=_date(ends, "--ends"))
        _revalidate(store)
    click.echo(f"season {s.label} closed: {s.starts_on} to {s.ends_on}")
