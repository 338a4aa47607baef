"""The geographic parts of an export: the GeoPackage (pyogrio, a GDAL-based writer) in the site's CRS, and the
Darwin Core occurrences with WGS 84 coordinates (site grid -> CRS by the fitted grid, CRS -> WGS 84 by PROJ)."""

from __future__ import annotations

import datetime as dt
import json
import math
import uuid
import warnings
import zoneinfo
from pathlib import Path
from typing import Any

import numpy as np

from schema import georef
from schema.analysis import Selection
from schema.chronostrat import dwc_geological_terms
from schema.dwc import identification
from schema.georef import point_radius
from schema.records import Find, GridTransform, Horizon, LevelPoint, Season, Site, Spit, Trench, Unit
from schema.survey.crs import projected_to_lonlat
from schema.survey.grid import grid_to_crs

__all__ = ["GPKG_VERSION", "dwc_rows", "vertical_reference", "write_geopackage"]


def _to_crs(grid: GridTransform | None, e: list[float], n: list[float]) -> tuple[np.ndarray, np.ndarray]:
    if grid is None:
        return np.asarray(e, float), np.asarray(n, float)
    return grid_to_crs(grid, e, n)


# GDAL 3.6 (Debian bookworm's gdal-bin) reads GeoPackage 1.0 to 1.3 and warns on 1.4, which newer GDAL writes by
# default ("This version of GeoPackage user_version=... may only be partially supported"): write 1.3.
GPKG_VERSION = "1.3"


def vertical_reference(site: Site, grid: GridTransform | None) -> str:
    """The layers' Z, in words: the site datum, and how it relates to the CRS heights."""
    if grid is None:
        return "Z: site datum heights (m); the site grid is not tied to a CRS, so their offset to CRS heights is unknown"
    off = site.vertical_offset_m
    return (f"Z: site datum heights (m). CRS height = Z {'-' if off >= 0 else '+'} {abs(off):g} m (the site's vertical "
            f"offset {off:g} m is site datum Z minus CRS height, fitted with the grid from the control points); "
            f"E, N in EPSG:{site.crs_epsg}")


def write_geopackage(path: Path, site: Site, grid: GridTransform | None, trenches: list[Trench], finds: list[Find],
                     levels: list[LevelPoint], *, units: list[Unit] | None = None, horizons: list[Horizon] | None = None,
                     seasons: list[Season] | None = None) -> dict[str, int]:
    """Layers ``finds`` (Point Z, with trench, unit, horizon, taxon, element, local date and season, so a GIS can
    style them without a join), ``trenches`` (Polygon), ``level_points`` (Point Z, with their unit's code); returns
    features per layer. Finds with no position, or flagged as possible human remains, are not in the finds layer.
    The vertical reference is in each layer's metadata (``vertical_reference``)."""
    import pyogrio
    import pyogrio.raw
    import shapely

    crs = f"EPSG:{site.crs_epsg}" if grid is not None else None
    counts: dict[str, int] = {}
    placed = [f for f in finds if f.e is not None and not f.human_remains]
    unit_by_id = {u.id: u for u in units or []}
    horizon_code = {h.id: h.code for h in horizons or []}
    trench_code = {t.id: t.code for t in trenches}
    season_label = {s.id: s.label for s in seasons or []}
    vertical = vertical_reference(site, grid)
    # GDAL stamps gpkg_contents.last_change with the clock unless OGR_CURRENT_DATE is set (GDAL GPKG driver
    # documentation, configuration options): stamp the newest find instead, so the same store gives the same bytes
    newest = max((f.found_at for f in finds), default=dt.datetime(2000, 1, 1, tzinfo=dt.timezone.utc))
    stamp = newest.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    append = False

    def layer(name: str, geoms: list[Any], gtype: str, fields: dict[str, list[Any]], dtype: dict[str, Any],
              about: str) -> None:
        nonlocal append
        wkb = shapely.to_wkb(np.asarray(geoms, dtype=object), output_dimension=3 if gtype.endswith("Z") else 2)
        names = list(fields)
        data = [np.asarray(fields[k], dtype=dtype[k]) for k in names]
        before = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": stamp})
        try:
            with warnings.catch_warnings():  # no CRS is deliberate when the site grid is not tied to one (manifest says so)
                warnings.filterwarnings("ignore", message="'crs' was not provided")
                pyogrio.raw.write(str(path), wkb, data, names, layer=name, driver="GPKG", geometry_type=gtype, crs=crs,
                                  append=append, layer_metadata={"DESCRIPTION": about, "VERTICAL_REFERENCE": vertical},
                                  dataset_options=None if append else {"VERSION": GPKG_VERSION},
                                  layer_options={"DESCRIPTION": about})
        finally:
            pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": before})
        append = True
        counts[name] = len(geoms)

    def unit_of(uid: uuid.UUID) -> Unit | None:
        return unit_by_id.get(uid)

    x, y = _to_crs(grid, [f.e for f in placed], [f.n for f in placed])  # type: ignore[misc]
    layer("finds", [shapely.Point(a, b, f.z) for a, b, f in zip(x, y, placed)], "Point Z", {
        "find_id": [str(f.id) for f in placed], "number": [f.number for f in placed],
        "trench": [trench_code.get(f.trench_id) for f in placed],
        "unit": [u.code if (u := unit_of(f.unit_id)) else None for f in placed],
        "horizon": [horizon_code.get(u.horizon_id) if (u := unit_of(f.unit_id)) and u.horizon_id else None
                    for f in placed],
        "category": [f.category for f in placed], "material": [f.material for f in placed],
        "taxon": [f.taxon for f in placed], "element": [f.element for f in placed],
        "count": [f.count for f in placed], "recovery": [f.recovery for f in placed],
        "found_on": [np.datetime64(_local_date(site, f.found_at), "D") for f in placed],
        "season": [season_label.get(f.season_id) for f in placed],
    }, {"find_id": object, "number": np.int64, "trench": object, "unit": object, "horizon": object,
        "category": object, "material": object, "taxon": object, "element": object, "count": np.int64,
        "recovery": object, "found_on": "datetime64[D]", "season": object},
        "Plotted finds (possible human remains left out). found_on: the day found (a GeoPackage Date), in the site's time zone "
        f"({site.timezone}).")
    polys = []
    for t in trenches:
        tx, ty = _to_crs(grid, [p[0] for p in t.outline], [p[1] for p in t.outline])
        polys.append(shapely.Polygon(list(zip(tx, ty))))
    layer("trenches", polys, "Polygon", {"code": [t.code for t in trenches]}, {"code": object},
          "Trench outlines, from the site grid")
    lx, ly = _to_crs(grid, [p.e for p in levels], [p.n for p in levels])
    layer("level_points", [shapely.Point(a, b, p.z) for a, b, p in zip(lx, ly, levels)], "Point Z", {
        "unit": [u.code if (u := unit_of(p.unit_id)) else str(p.unit_id) for p in levels],
        "trench": [trench_code.get(u.trench_id) if (u := unit_of(p.unit_id)) else None for p in levels],
        "surface": [p.surface for p in levels],
    }, {"unit": object, "trench": object, "surface": object}, "Level points on unit surfaces, with their unit's code")
    return counts


def _local_date(site: Site, when: dt.datetime) -> str:
    return when.astimezone(zoneinfo.ZoneInfo(site.timezone)).date().isoformat()


_PROTOCOL = {"plotted": "plotted in place", "surface": "surface collection", "core": "core"}


def dwc_rows(site: Site, grid: GridTransform | None, trenches: list[Trench], units: list[Unit],
             horizons: list[Horizon], sel: Selection, *, spits: list[Spit] | None = None,
             horizon_ages: dict[uuid.UUID, tuple[float | None, float | None]] | None = None,
             media: dict[uuid.UUID, list[str]] | None = None) -> list[dict[str, Any]]:
    """One Darwin Core occurrence per counted fossil find (what each term holds: ``schema.dwc``).
    ``horizon_ages``: horizon id -> (youngest, oldest) ka of its age bracket, for the chronostratigraphic terms;
    ``media``: find id -> its exported photo files (``photos/...``), for ``associatedMedia``."""
    fossils = [f for f in sel.included if f.category == "fossil"]
    unit_by_id = {u.id: u for u in units}
    horizon_by_id = {h.id: h for h in horizons}
    trench_by_id = {t.id: t for t in trenches}
    spit_by_id = {s.id: s for s in spits or []}
    ages = horizon_ages or {}
    tied = grid is not None
    shown = [f for f in fossils if f.e is not None and not f.human_remains and tied]
    where: dict[uuid.UUID, tuple[float, float]] = {}
    if shown:
        x, y = grid_to_crs(grid, [f.e for f in shown], [f.n for f in shown])
        lon, lat = projected_to_lonlat(x, y, site.crs_epsg)
        where = {f.id: (float(b), float(a)) for f, a, b in zip(shown, lon, lat)}
    # trench-level georeferences (point-radius over the outline in CRS metres) for finds with no position
    trench_georef: dict[uuid.UUID, tuple[float, float, float]] = {}
    if tied:
        for t in trenches:
            tx, ty = grid_to_crs(grid, [p[0] for p in t.outline], [p[1] for p in t.outline])
            pr = point_radius(list(zip(tx.tolist(), ty.tolist())))
            lon, lat = projected_to_lonlat([pr.x], [pr.y], site.crs_epsg)
            trench_georef[t.id] = (float(lat[0]), float(lon[0]), math.ceil(pr.radius * 10) / 10)
    offset = site.vertical_offset_m
    datum = (f"heights of the CRS the site grid is tied to (= site datum Z {'-' if offset >= 0 else '+'} "
             f"{abs(offset):g} m)" if tied else None)
    rows = []
    for f in fossils:
        u = unit_by_id.get(f.unit_id)
        h = horizon_by_id.get(u.horizon_id) if u and u.horizon_id else None
        t = trench_by_id.get(f.trench_id)
        sp = spit_by_id.get(f.spit_id) if f.spit_id else None
        tcode = t.code if t else "?"
        withheld = "precise location withheld: possible human remains" if f.human_remains else (
            "no coordinates: the site grid is not tied to a CRS" if not tied else None)
        ll = where.get(f.id)
        by_trench = trench_georef.get(f.trench_id) if ll is None and f.e is None and not f.human_remains else None
        if ll:
            lat, lon = ll
            unc = round(2 * f.position_sigma_m, 3) if f.position_sigma_m else None
            protocol = f"surveyed position ({f.position_source}), site grid to EPSG:{site.crs_epsg} by the fitted grid"
            remarks = "the find's own position"
        elif by_trench:
            lat, lon, unc = by_trench
            protocol = georef.PROTOCOL
            remarks = f"no position of its own ({f.recovery}): centre of trench {tcode} and the radius covering it"
        else:
            lat = lon = unc = None
            protocol = remarks = None
        zmin = zmax = None
        if tied and not f.human_remains:
            if f.z is not None:
                zmin = zmax = round(f.z - offset, 3)
            elif sp is not None:
                zmin, zmax = round(sp.bottom_z - offset, 3), round(sp.top_z - offset, 3)
        litho = [x for x in ((h.formation, h.member, h.bed) if h else ()) if x]
        young, old = ages.get(h.id, (None, None)) if h else (None, None)
        sampling = (f"sieved, {sp.mesh_mm:g} mm mesh" if sp and sp.mesh_mm else "sieved") if f.recovery == "sieved" \
            else _PROTOCOL.get(f.recovery, f.recovery)
        rows.append({
            "occurrenceID": f"urn:uuid:{f.id}", "basisOfRecord": "FossilSpecimen", "occurrenceStatus": "detected",
            "catalogNumber": f"{site.code}-{f.number}", "recordedBy": f.recorder,
            "eventDate": _local_date(site, f.found_at),
            "fieldNumber": " ".join(x for x in (tcode, u.code if u else None, f"spit {sp.number}" if sp else None) if x),
            "samplingProtocol": sampling, **identification(f.taxon),
            "objectQuantity": f.count, "objectQuantityType": "pieces",
            "dynamicProperties": json.dumps({"element": f.element}) if f.element else None,
            "countryCode": site.country_code, "locality": f"{site.name}, trench {tcode}",
            "locationRemarks": "; ".join(x for x in (f"trench {tcode}", f"unit {u.code}" if u else None,
                                                     f"horizon {h.code} {h.label}" if h else None) if x)
                               + " (excavation labels)",
            "decimalLatitude": round(lat, 7) if lat is not None else None,
            "decimalLongitude": round(lon, 7) if lon is not None else None,
            "geodeticDatum": "EPSG:4326" if lat is not None else None,
            "coordinateUncertaintyInMeters": unc, "georeferenceProtocol": protocol, "georeferenceRemarks": remarks,
            "minimumElevationInMeters": zmin, "maximumElevationInMeters": zmax,
            "verticalDatum": datum if zmin is not None else None,
            "geologicalContextID": f"{site.code}-{h.code}" if h else None,
            **dwc_geological_terms(young, old),
            "lithostratigraphicTerms": " | ".join(litho) or None,
            "formation": h.formation if h else None, "member": h.member if h else None, "bed": h.bed if h else None,
            "informationWithheld": withheld,
            "occurrenceRemarks": " ".join(sel.issue_codes.get(f.id, [])) or None,
            "associatedMedia": None if f.human_remains else " | ".join((media or {}).get(f.id, [])) or None,
        })
    return rows


def age_brackets(ages: Any) -> dict[uuid.UUID, tuple[float | None, float | None]]:
    """Each horizon's age bracket for Darwin Core, from the age model (``export_ages.AgeTables``): the younger end
    of its top's 95 % interval and the older end of its base's; an end the model cannot give stays open."""
    out = {}
    for h in ages.horizons:
        young = h.youngest.lo95_ka if h.youngest else None
        old = h.oldest.hi95_ka if h.oldest else None
        out[h.horizon_id] = (young if young is not None and math.isfinite(young) else None,
                             old if old is not None and math.isfinite(old) else None)
    return out
