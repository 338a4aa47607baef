"""Setting a real site up on the camp server, and keeping its set-up right through the season.

``init_site`` writes what a set-up file describes (``schema.setup_file``) in one transaction, as versions of the
server's own device, so each tablet's first sync brings it. The day-to-day changes (a control point added or
corrected, a trench added or re-outlined, a season opened or closed) are versioned edits the same way; the grid
is refitted whenever a control point known in both systems changes. ``site_summary`` is what ``baulk site show``
and the camp's Site page read.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from schema.errors import DuplicateRecord, RecordNotFound
from schema.records import ControlPoint, Horizon, Season, Site, Trench
from schema.setup_file import (
    SetupFileInvalid, SetupPlan, check_outlines, far_control_points, fit_site_grid, parse_outline,
)
from schema.validation import check

from .store import ServerStore

__all__ = ["close_season", "init_site", "open_season", "set_control_point", "set_trench", "site_of", "site_summary"]


def site_of(store: ServerStore) -> Site:
    """The store's site (a camp store holds one), or a clear error saying how to set one up."""
    sites = store.list(Site, order_by="code")
    if not sites:
        raise RecordNotFound("this store holds no site yet; set one up with baulk site init SETUP.toml --db URL")
    return sites[0]


def _grid_report(fit: Any, poly: Any) -> dict[str, Any] | None:
    if fit is None:
        return None
    return {"rotation_deg": round(fit.rotation_deg, 8), "scale": round(fit.scale, 9),
            "max_residual_m": round(max(float(r["d"]) for r in fit.residuals), 4),
            "residuals": [{"point": r["point"], "de": round(float(r["de"]), 4), "dn": round(float(r["dn"]), 4),
                           "d": round(float(r["d"]), 4)} for r in fit.residuals],
            "polynomial_max_error_m": poly.max_error_m if poly is not None else None}


def init_site(store: ServerStore, plan: SetupPlan) -> dict[str, Any]:
    """Write a checked set-up (``schema.setup_file.read_setup``): the site, its first season, control points and
    trenches, in one transaction. Refused when the store already holds a site."""
    existing = store.list(Site)
    if existing:
        raise DuplicateRecord(
            f"this store already holds site {existing[0].code} ({existing[0].name}); a camp store holds one site. "
            "Give --db a new store for another site, or change this one with baulk site control-point / trench")
    with store.atomic():
        for record in plan.records():
            store.add(record)
    return {"site": plan.site.code, "name": plan.site.name, "crs_epsg": plan.site.crs_epsg,
            "season": plan.season.label, "control_points": len(plan.control_points),
            "trenches": [t.code for t in plan.trenches], "grid": _grid_report(plan.grid_fit, plan.polynomial),
            "warnings": plan.warnings}


def _centre(store: ServerStore, site: Site) -> tuple[float, float] | None:
    pts = [p for t in store.list(Trench, site_id=site.id) for p in t.outline]
    pts = pts or [(cp.e, cp.n) for cp in store.list(ControlPoint, site_id=site.id)]
    return (sum(p[0] for p in pts) / len(pts), sum(p[1] for p in pts) / len(pts)) if pts else None


def set_control_point(store: ServerStore, *, code: str, e: float, n: float, z: float, crs_e: float | None = None,
                      crs_n: float | None = None, accept_residuals: bool = False) -> dict[str, Any]:
    """Add a control point or correct one; the site grid is refitted when the points known in both systems
    change, and refused over the site's tolerance unless ``accept_residuals``. Returns the grid before and after."""
    site = site_of(store)
    points = {cp.code: cp for cp in store.list(ControlPoint, site_id=site.id)}
    old = points.get(code)
    data = {"site_id": site.id, "code": code, "e": e, "n": n, "z": z, "crs_e": crs_e, "crs_n": crs_n}
    point = check(ControlPoint, {**data, "id": old.id} if old else data, record="control_point")
    points[code] = point
    for far, off in far_control_points(list(points.values())):
        if far == code:
            raise SetupFileInvalid("control point " + code, [
                f"its CRS coordinates lie {off:,.0f} m from where its grid coordinates put it among the other control "
                "points; check crs_e and crs_n for a typo (or a point from another zone)"])
    before = _grid_of(site)
    refit = (old is None and crs_e is not None) or (old is not None and (old.crs_e, old.crs_n, old.e, old.n) != (
        crs_e, crs_n, e, n) and (crs_e is not None or old.crs_e is not None))
    new_site, fit, poly, warnings = (fit_site_grid(site, list(points.values()), centre=_centre(store, site),
                                                   accept_residuals=accept_residuals)
                                     if refit else (site, None, None, []))
    with store.atomic():
        store.put(point)
        if refit:
            store.put(new_site)
    return {"point": code, "added": old is None, "refitted": refit, "before": before,
            "after": _grid_report(fit, poly) if refit else before, "warnings": warnings}


def _grid_of(site: Site) -> dict[str, Any] | None:
    if site.grid is None:
        return None
    import math

    return {"rotation_deg": round(math.degrees(math.atan2(site.grid.b, site.grid.a)), 8),
            "scale": round(math.hypot(site.grid.a, site.grid.b), 9)}


def set_trench(store: ServerStore, *, code: str, outline: Any, season: str | None = None) -> dict[str, Any]:
    """Add a trench or change its outline ([[E, N], ...] or control-point codes); checked with shapely against
    itself and every other trench of the site before anything is written."""
    site = site_of(store)
    control = {cp.code: cp for cp in store.list(ControlPoint, site_id=site.id)}
    try:
        ring = parse_outline(outline, control)
    except ValueError as exc:
        raise SetupFileInvalid(f"trench {code}", [f"outline: {exc}"]) from None
    trenches = {t.code: t for t in store.list(Trench, site_id=site.id)}
    rings = {c: list(t.outline) for c, t in trenches.items() if c != code} | {code: ring}
    problems = [p for c, p in check_outlines(rings) if c == code or code in p]
    if problems:
        raise SetupFileInvalid(f"trench {code}", [f"outline: {p}" for p in problems])
    old = trenches.get(code)
    seasons = list(old.seasons_opened) if old else []
    if season is not None or old is None:
        s = _season(store, site, season) if season is not None else _current_season(store, site)
        if s is not None and s.id not in seasons:
            seasons.append(s.id)
    data = {"site_id": site.id, "code": code, "outline": ring, "seasons_opened": seasons}
    if old is not None:
        data = {**old.model_dump(), **data}
    trench = store.put(check(Trench, data, record="trench"))
    from shapely import Polygon

    return {"trench": trench.code, "added": old is None, "area_m2": round(Polygon(trench.outline).area, 3),
            "corners": len(trench.outline)}


def _season(store: ServerStore, site: Site, label: str) -> Season:
    found = store.list(Season, site_id=site.id, label=label)
    if not found:
        known = ", ".join(s.label for s in store.list(Season, site_id=site.id)) or "none"
        raise RecordNotFound(f"season {label!r} does not exist (seasons: {known}); open it with baulk season open")
    return found[0]


def _current_season(store: ServerStore, site: Site) -> Season | None:
    seasons = sorted(store.list(Season, site_id=site.id), key=lambda s: s.starts_on)
    return seasons[-1] if seasons else None


def open_season(store: ServerStore, *, label: str, starts_on: dt.date, ends_on: dt.date | None = None) -> Season:
    """A new field season; units and find numbering carry on from the earlier ones."""
    site = site_of(store)
    if store.list(Season, site_id=site.id, label=label):
        raise DuplicateRecord(f"season {label!r} already exists; choose another label, or close it with baulk season close")
    for s in store.list(Season, site_id=site.id):
        if s.ends_on is None:
            raise DuplicateRecord(f"season {s.label!r} is still open; close it first with baulk season close "
                                  f"{s.label} --ends YYYY-MM-DD")
    return store.add(check(Season, {"site_id": site.id, "label": label, "starts_on": starts_on, "ends_on": ends_on},
                           record="season"))


def close_season(store: ServerStore, *, label: str, ends_on: dt.date) -> Season:
    """Close a season on its last day (dates of later finds are then checked against it)."""
    site = site_of(store)
    season = _season(store, site, label)
    return store.put(check(Season, {**season.model_dump(), "ends_on": ends_on}, record="season"))


def site_summary(store: ServerStore) -> dict[str, Any]:
    """The site's set-up in one dict: settings, seasons, control points with their grid residuals, the grid,
    trenches with outline and area, horizons (what ``baulk site show`` and the camp's Site page show)."""
    from shapely import Polygon

    from schema.survey.grid import PointPair, fit_grid

    site = site_of(store)
    points = sorted(store.list(ControlPoint, site_id=site.id), key=lambda c: c.code)
    pairs = [PointPair(cp.code, cp.e, cp.n, cp.crs_e, cp.crs_n) for cp in points if cp.crs_e is not None]
    residual: dict[str, float] = {}
    grid = None
    if site.grid is not None and len(pairs) >= 2:
        fit = fit_grid(pairs)
        residual = {str(r["point"]): round(float(r["d"]), 4) for r in fit.residuals}
        grid = {"rotation_deg": round(fit.rotation_deg, 8), "scale": round(fit.scale, 9),
                "max_residual_m": max(residual.values()),
                "polynomial_max_error_m": site.grid_polynomial.max_error_m if site.grid_polynomial else None}
    try:
        from schema.survey.crs import crs_name

        crs = crs_name(site.crs_epsg)
    except Exception:  # noqa: BLE001 - a name is a nicety; no PROJ, no name
        crs = None
    return {
        "site": site, "crs_name": crs,
        "seasons": sorted(store.list(Season, site_id=site.id), key=lambda s: s.starts_on),
        "control_points": [{"code": cp.code, "e": cp.e, "n": cp.n, "z": cp.z, "crs_e": cp.crs_e, "crs_n": cp.crs_n,
                            "residual_m": residual.get(cp.code)} for cp in points],
        "grid": grid,
        "trenches": [{"code": t.code, "outline": [list(p) for p in t.outline],
                      "area_m2": round(Polygon(t.outline).area, 3)}
                     for t in sorted(store.list(Trench, site_id=site.id), key=lambda t: t.code)],
        "horizons": sorted(store.list(Horizon, site_id=site.id), key=lambda h: h.order),
    }
