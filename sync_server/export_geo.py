"""The geographic parts of an export: the GeoPackage (pyogrio, a GDAL-based writer) in the site's CRS, and the
Darwin Core occurrences with WGS 84 coordinates (site grid -> CRS by the fitted grid, CRS -> WGS 84 by PROJ)."""

from __future__ import annotations

import json
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from schema.analysis import Selection
from schema.records import Find, GridTransform, Horizon, LevelPoint, Site, Trench, Unit
from schema.survey.crs import projected_to_lonlat
from schema.survey.grid import grid_to_crs

__all__ = ["dwc_rows", "write_geopackage"]


def _to_crs(grid: GridTransform | None, e: list[float], n: list[float]) -> tuple[np.ndarray, np.ndarray]:
    if grid is None:
        return np.asarray(e, float), np.asarray(n, float)
    return grid_to_crs(grid, e, n)


def write_geopackage(path: Path, site: Site, grid: GridTransform | None, trenches: list[Trench], finds: list[Find],
                     levels: list[LevelPoint]) -> dict[str, int]:
    """Layers ``finds`` (Point Z), ``trenches`` (Polygon), ``level_points`` (Point Z); returns features per layer.
    Finds with no position, or flagged as possible human remains, are not in the finds layer."""
    import pyogrio.raw
    import shapely

    crs = f"EPSG:{site.crs_epsg}" if grid is not None else None
    counts: dict[str, int] = {}
    placed = [f for f in finds if f.e is not None and not f.human_remains]
    append = False

    def layer(name: str, geoms: list[Any], gtype: str, fields: dict[str, list[Any]], dtype: dict[str, Any]) -> None:
        nonlocal append
        wkb = shapely.to_wkb(np.asarray(geoms, dtype=object), output_dimension=3 if gtype.endswith("Z") else 2)
        names = list(fields)
        data = [np.asarray(fields[k], dtype=dtype[k]) for k in names]
        with warnings.catch_warnings():  # no CRS is deliberate when the site grid is not tied to one (manifest says so)
            warnings.filterwarnings("ignore", message="'crs' was not provided")
            pyogrio.raw.write(str(path), wkb, data, names, layer=name, driver="GPKG", geometry_type=gtype, crs=crs,
                              append=append)
        append = True
        counts[name] = len(geoms)

    x, y = _to_crs(grid, [f.e for f in placed], [f.n for f in placed])  # type: ignore[misc]
    layer("finds", [shapely.Point(a, b, f.z) for a, b, f in zip(x, y, placed)], "Point Z", {
        "find_id": [str(f.id) for f in placed], "number": [f.number for f in placed],
        "category": [f.category for f in placed], "material": [f.material for f in placed],
        "recovery": [f.recovery for f in placed],
    }, {"find_id": object, "number": np.int64, "category": object, "material": object, "recovery": object})
    polys = []
    for t in trenches:
        tx, ty = _to_crs(grid, [p[0] for p in t.outline], [p[1] for p in t.outline])
        polys.append(shapely.Polygon(list(zip(tx, ty))))
    layer("trenches", polys, "Polygon", {"code": [t.code for t in trenches]}, {"code": object})
    lx, ly = _to_crs(grid, [p.e for p in levels], [p.n for p in levels])
    layer("level_points", [shapely.Point(a, b, p.z) for a, b, p in zip(lx, ly, levels)], "Point Z", {
        "unit_id": [str(p.unit_id) for p in levels], "surface": [p.surface for p in levels],
    }, {"unit_id": object, "surface": object})
    return counts


def dwc_rows(site: Site, grid: GridTransform | None, trenches: list[Trench], units: list[Unit],
             horizons: list[Horizon], sel: Selection) -> list[dict[str, Any]]:
    """One Darwin Core occurrence per counted fossil find."""
    fossils = [f for f in sel.included if f.category == "fossil"]
    unit_by_id = {u.id: u for u in units}
    horizon_by_id = {h.id: h for h in horizons}
    trench_code = {t.id: t.code for t in trenches}
    shown = [f for f in fossils if f.e is not None and not f.human_remains and grid is not None]
    lon, lat = (np.array([]), np.array([]))
    if shown:
        x, y = grid_to_crs(grid, [f.e for f in shown], [f.n for f in shown])
        lon, lat = projected_to_lonlat(x, y, site.crs_epsg)
    where = {f.id: (float(a), float(b)) for f, a, b in zip(shown, lat, lon)}
    rows = []
    for f in fossils:
        u = unit_by_id.get(f.unit_id)
        h = horizon_by_id.get(u.horizon_id) if u and u.horizon_id else None
        ll = where.get(f.id)
        withheld = "precise location withheld: possible human remains" if f.human_remains else (
            "no coordinates: the site grid is not tied to a CRS" if grid is None and f.e is not None else None)
        rows.append({
            "occurrenceID": f"urn:uuid:{f.id}", "basisOfRecord": "FossilSpecimen",
            "catalogNumber": f"{site.code}-{f.number}", "recordedBy": f.recorder,
            "eventDate": f.found_at.date().isoformat(), "scientificName": f.taxon, "individualCount": f.count,
            "dynamicProperties": json.dumps({"element": f.element}) if f.element else None,
            "lithostratigraphicTerms": " | ".join(p for p in (f"{h.code} {h.label}" if h else None,
                                                              f"unit {u.code}" if u else None) if p),
            "locality": f"{site.name}, trench {trench_code.get(f.trench_id, '?')}",
            "decimalLatitude": round(ll[0], 7) if ll else None, "decimalLongitude": round(ll[1], 7) if ll else None,
            "geodeticDatum": "EPSG:4326" if ll else None,
            "coordinateUncertaintyInMeters": round(2 * f.position_sigma_m, 3) if ll and f.position_sigma_m else None,
            "informationWithheld": withheld,
            "occurrenceRemarks": " ".join(sel.issue_codes.get(f.id, [])) or None,
        })
    return rows
