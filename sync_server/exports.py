"""``baulk export``: the analyst's files for chosen seasons, written into one folder and described by a manifest.

Files (every CSV is described by ``datapackage.json``, a Frictionless Data Package):
- ``finds.csv``: the finds counted, with trench, unit, horizon and, outside strict mode, their open issue codes;
- ``excluded.csv``: every find left out, with the rule code and message (voided finds always; in strict mode
  every find an error-severity check names);
- ``counts_by_horizon.csv`` and ``counts_by_unit.csv``: finds and items per horizon (unit) x category x
  material x recovery, weights, excavated m3 and sieved L, densities per m3 and per 10 L;
- ``volumes.csv``: excavated and sieved volume per unit, from its spits;
- ``dwc_occurrence.csv``: Darwin Core occurrences of the fossil finds, coordinates in WGS 84;
- ``finds.gpkg``: GeoPackage in the site's CRS: finds (points with Z), trenches (polygons), level points;
- ``harris_matrix.svg`` / ``.png`` (reduced, layered, coloured by horizon, problem units outlined) and, per
  trench, ``plan_<trench>.png`` and ``section_<trench>.png`` of the plotted finds coloured by horizon;
- ``manifest.json``: counts, validation state, software version and the SHA-256 of every file.

Finds flagged as possible human remains never carry a precise location in any file (``location_withheld``).
Files are written into a temporary folder and moved into place at the end, so a failed export leaves no half
set. The counting itself is ``schema.analysis``; this module reads the store and writes files.
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import json
import shutil
import uuid
from pathlib import Path
from typing import Any, Callable

from schema import __version__
from schema.analysis import Excluded, Selection, Volume, count_rows, select_finds, unit_volumes
from schema.dwc import DWC_TERMS
from schema.errors import RecordNotFound
from schema.records import Find, Horizon, LevelPoint, Season, Site, Spit, Trench, Unit
from schema.strata.validate import validate
from schema.withholding import Withheld, withheld

from .export_ages import AGE_RESOURCES
from .export_sql import tally_in_db
from .store import ServerStore

__all__ = ["RESOURCES", "export_zip", "run_export"]

Progress = Callable[[str], None]

# name -> (description, [(field, frictionless type, description, constraints)], primary key, foreign keys)
_ID = {"required": True}
RESOURCES: dict[str, tuple[str, list[tuple[str, str, str, dict[str, Any]]], list[str], list[dict[str, Any]]]] = {
    "finds": ("Finds counted in the tables", [
        ("id", "string", "find id (UUID)", _ID), ("number", "integer", "site find number", {"required": True, "minimum": 1}),
        ("trench", "string", "trench code", _ID), ("unit", "string", "unit (context) code", _ID),
        ("horizon", "string", "horizon code; empty when the unit has none", {}),
        ("category", "string", "artifact, fossil or sample", {"required": True, "enum": ["artifact", "fossil", "sample"]}),
        ("material", "string", "material from the category's vocabulary", _ID),
        ("taxon", "string", "lowest taxon identified (fossils)", {}), ("element", "string", "skeletal element (fossils)", {}),
        ("count", "integer", "items in the find (pieces in the bag)", {"required": True, "minimum": 1}),
        ("weight_g", "number", "weight in grams", {"minimum": 0}),
        ("recovery", "string", "how it was recovered", {"required": True, "enum": ["plotted", "sieved", "surface", "core"]}),
        ("spit", "integer", "spit number within the unit (sieved finds)", {"minimum": 1}),
        ("e", "number", "easting, site grid metres", {}), ("n", "number", "northing, site grid metres", {}),
        ("z", "number", "elevation, metres", {}),
        ("position_source", "string", "total_station, gnss, tape or none", {"enum": ["total_station", "gnss", "tape", "none"]}),
        ("found_at", "datetime", "when it was found (UTC)", _ID), ("recorder", "string", "recorder's initials", _ID),
        ("location_withheld", "boolean", "possible human remains: the position is not published", _ID),
        ("issues", "string", "open check codes, space-separated (empty in strict mode)", {}),
    ], ["id"], []),
    "excluded": ("Finds left out of the tables, each with the rule that left it out", [
        ("id", "string", "find id (UUID)", _ID), ("number", "integer", "site find number", _ID),
        ("trench", "string", "trench code", _ID), ("unit", "string", "unit code", _ID),
        ("code", "string", "rule code (VOIDED, or a check code from the validation catalogue)", _ID),
        ("message", "string", "why, in words", _ID),
    ], ["id"], []),
    "volumes": ("Excavated and sieved volume per unit, from its spits", [
        ("unit", "string", "unit code", _ID), ("horizon", "string", "horizon code", {}),
        ("spits", "integer", "spits recorded", {"required": True, "minimum": 0}),
        ("volume_from", "string", "spits, or surfaces (top and bottom level points over the trench outline)",
         {"enum": ["spits", "surfaces"]}),
        ("excavated_m3", "number", "excavated volume, m3 (area x thickness summed over spits)", {"minimum": 0}),
        ("sieved_l", "number", "sieved volume, litres", {"minimum": 0}),
    ], ["unit"], []),
}
_COUNT_FIELDS = [
    ("category", "string", "artifact, fossil or sample", _ID), ("material", "string", "material", _ID),
    ("recovery", "string", "plotted, sieved, surface or core (counted apart)", _ID),
    ("finds", "integer", "finds (bags)", {"required": True, "minimum": 1}),
    ("items", "integer", "items (sum of the finds' counts)", {"required": True, "minimum": 1}),
    ("weight_g", "number", "sum of recorded weights, g; empty when none was weighed", {"minimum": 0}),
    ("excavated_m3", "number", "excavated volume of the horizon (unit), m3", {"minimum": 0}),
    ("sieved_l", "number", "sieved volume of the horizon (unit), L", {"minimum": 0}),
    ("per_m3", "number", "finds per m3 excavated", {"minimum": 0}),
    ("per_10l", "number", "finds per 10 L sieved (sieved finds only)", {"minimum": 0}),
]
RESOURCES["counts_by_horizon"] = ("Finds per horizon x category x material x recovery", [
    ("horizon", "string", "horizon code; empty for units with no horizon", {}), *_COUNT_FIELDS,
], ["horizon", "category", "material", "recovery"], [])
RESOURCES["counts_by_unit"] = ("Finds per unit x category x material x recovery", [
    ("horizon", "string", "horizon code of the unit", {}), ("unit", "string", "unit code", _ID), *_COUNT_FIELDS,
], ["unit", "category", "material", "recovery"],
    [{"fields": ["unit"], "reference": {"resource": "volumes", "fields": ["unit"]}}])
RESOURCES["dwc_occurrence"] = ("Darwin Core occurrences of the fossil finds (coordinates WGS 84)",
                               [(t, ty, d, c) for t, ty, d, c in DWC_TERMS], ["occurrenceID"], [])
RESOURCES.update(AGE_RESOURCES)  # ages_by_horizon, ages_by_unit, ages_by_find, ranges: sync_server/export_ages.py


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(round(v, 9))
    if isinstance(v, dt.datetime):
        return v.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return str(v)


def _write_csv(path: Path, name: str, rows: list[dict[str, Any]]) -> int:
    names = [f[0] for f in RESOURCES[name][1]]
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(names)
        for r in rows:
            w.writerow([_cell(r.get(k)) for k in names])
    return len(rows)


def _datapackage(site: Site, described: dict[str, Any] | None = None) -> dict[str, Any]:
    resources = []
    for name, (title, fields, pk, fks) in (described or RESOURCES).items():
        schema: dict[str, Any] = {"fields": [{"name": f, "type": t, "description": d, **({"constraints": c} if c else {})}
                                             for f, t, d, c in fields], "missingValues": [""]}
        if pk:
            schema["primaryKey"] = pk
        if fks:
            schema["foreignKeys"] = fks
        resources.append({"name": name, "path": f"{name}.csv", "title": title, "profile": "tabular-data-resource",
                          "format": "csv", "mediatype": "text/csv", "encoding": "utf-8", "schema": schema})
    return {"name": f"baulk-{site.code.lower()}", "title": f"{site.name}: finds, counts and volumes",
            "profile": "tabular-data-package", "created": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "resources": resources}


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def run_export(store: ServerStore, out: Path, *, seasons: list[str] | None = None, strict: bool = False,
               progress: Progress | None = None) -> dict[str, Any]:
    """Write every export file into ``out`` (created; files of an earlier export there are replaced). The files
    are made in ``out.part`` first, so an output folder that cannot be written is refused before any work, and a
    failed export leaves nothing behind."""
    out = Path(out)
    tmp = out.with_name(out.name + ".part")
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir(parents=True)
    try:
        return _export_into(store, out, tmp, seasons=seasons, strict=strict, progress=progress)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)  # renamed to ``out`` when the export is whole


def _export_into(store: ServerStore, out: Path, tmp: Path, *, seasons: list[str] | None, strict: bool,
                 progress: Progress | None) -> dict[str, Any]:
    say = progress or (lambda _msg: None)
    say("reading the site and running every check")
    data = store.site_data()
    report = validate(data)
    site = data.site
    chosen = store.list(Season, site_id=site.id)
    if seasons:
        chosen = [s for s in chosen if s.label in seasons]
        missing = set(seasons) - {s.label for s in chosen}
        if missing:
            raise RecordNotFound(f"no season is labelled {', '.join(sorted(missing))}; "
                                 f"known: {', '.join(s.label for s in store.list(Season, site_id=site.id))}")
    season_ids = {s.id for s in chosen}
    finds = [f for f in store.list(Find, site_id=site.id) if f.season_id in season_ids]
    sel = _withheld(select_finds(finds, report.issues, strict=strict), withheld("export", finds))
    units, horizons = data.units, store.list(Horizon, site_id=site.id)
    unit_ids = {u.id for u in units}
    spits = [s for s in store.list(Spit) if s.unit_id in unit_ids]
    levels = [lp for lp in store.list(LevelPoint) if lp.unit_id in unit_ids]
    volumes = unit_volumes(spits, units=units, levels=levels, outlines={t.id: list(t.outline) for t in data.trenches})
    rows = _tables(store, tmp, site, season_ids, data.trenches, units, horizons, spits, volumes, sel, say)
    grid = site.grid  # site grid -> CRS; without it the GeoPackage stays in grid metres, with no CRS
    say("writing Darwin Core occurrences and the GeoPackage")
    from . import export_geo

    rows["dwc_occurrence"] = _write_csv(tmp / "dwc_occurrence.csv", "dwc_occurrence",
                                        export_geo.dwc_rows(site, grid, data.trenches, units, horizons, sel))
    say("modelling the ages of the horizons and the ranges of the finds")
    from .export_ages import compute_ages, draw_age_pictures, write_age_files

    ages = compute_ages(data, sel.included, matrix=report.matrix)
    rows.update(write_age_files(ages, tmp))
    (tmp / "datapackage.json").write_text(json.dumps(_datapackage(site), indent=2))
    layers = export_geo.write_geopackage(tmp / "finds.gpkg", site, grid, data.trenches, sel.included, levels)
    say("drawing the Harris matrix and the trench plans and sections")
    from .export_pictures import draw_matrix, draw_trench_plots

    problems = {uuid.UUID(i.record_id) for i in report.issues if i.record == "unit" and i.record_id}
    pictures = draw_matrix(report.matrix, horizons, problems, tmp)
    pictures += draw_trench_plots(data.trenches, units, horizons, sel.included, tmp)
    pictures += draw_age_pictures(ages, data, tmp)
    manifest = {
        "software": f"baulk {__version__}", "site": site.code, "seasons": sorted(s.label for s in chosen),
        "strict": strict, "created": dt.datetime.now(dt.timezone.utc).isoformat(),
        "crs": f"EPSG:{site.crs_epsg}" if grid else None,
        "crs_note": None if grid else "the site grid is not tied to a CRS yet (fit it from control points): the "
                                      "GeoPackage is in site grid metres and Darwin Core rows carry no coordinates",
        "counts": {"finds_total": len(finds), "finds_included": len(sel.included), "finds_excluded": len(sel.excluded),
                   "locations_withheld": sum(1 for f in sel.included if f.human_remains),
                   "rows": rows, "geopackage_layers": layers, "pictures": [p.name for p in pictures]},
        "validation": {**report.counts(), "checked_finds": report.finds_checked},
        "files": {},
    }
    for p in sorted(tmp.iterdir()):
        manifest["files"][p.name] = {"sha256": _sha256(p), "bytes": p.stat().st_size}
    (tmp / "manifest.json").write_text(json.dumps(manifest, indent=2))
    if out.exists():
        shutil.rmtree(out)
    tmp.replace(out)
    say(f"wrote {len(manifest['files']) + 1} files into {out}")
    return manifest


def _tables(store: ServerStore, tmp: Path, site: Site, season_ids: set[Any], trenches: list[Trench], units: list[Unit],
            horizons: list[Horizon], spits: list[Spit], vols: dict[Any, Volume], sel: Selection,
            say: Progress) -> dict[str, int]:
    unit_by_id = {u.id: u for u in units}
    trench_code = {t.id: t.code for t in trenches}
    horizon_code = {h.id: h.code for h in horizons}
    spit_number = {s.id: s.number for s in spits}

    def where(f: Find) -> dict[str, Any]:
        u = unit_by_id.get(f.unit_id)
        return {"trench": trench_code.get(f.trench_id, str(f.trench_id)), "unit": u.code if u else str(f.unit_id),
                "horizon": horizon_code.get(u.horizon_id) if u and u.horizon_id else None}

    say(f"writing {len(sel.included)} finds and {len(sel.excluded)} left out")
    found = []
    for f in sel.included:  # possible human remains come blanked (_withheld): no position in any file
        found.append({**f.model_dump(), **where(f), "spit": spit_number.get(f.spit_id) if f.spit_id else None,
                      "location_withheld": f.human_remains, "id": str(f.id),
                      "issues": " ".join(sel.issue_codes.get(f.id, []))})
    rows = {"finds": _write_csv(tmp / "finds.csv", "finds", found)}
    rows["excluded"] = _write_csv(tmp / "excluded.csv", "excluded", [
        {"id": str(x.find.id), "number": x.find.number, **where(x.find), "code": x.code, "message": x.message}
        for x in sel.excluded])
    rows["volumes"] = _write_csv(tmp / "volumes.csv", "volumes", [
        {"unit": u.code, "horizon": horizon_code.get(u.horizon_id) if u.horizon_id else None,
         "spits": vols[u.id].spits if u.id in vols else 0,
         "volume_from": ("spits" if vols[u.id].spits else "surfaces") if u.id in vols else None,
         "excavated_m3": round(vols[u.id].excavated_m3, 6) if u.id in vols else None,
         "sieved_l": round(vols[u.id].sieved_l, 3) if u.id in vols and vols[u.id].spits else None} for u in units])
    say("counting per horizon and per unit (in the database)")
    for name, by_unit, names in (("counts_by_horizon", False, ("horizon", "category", "material", "recovery")),
                                 ("counts_by_unit", True, ("horizon", "unit", "category", "material", "recovery"))):
        with store.read() as conn:
            everything = season_ids == {s.id for s in store.list(Season, site_id=site.id)}
            tallies = tally_in_db(conn, site_id=site.id, season_ids=None if everything else season_ids, by_unit=by_unit,
                                  exclude=[x.find.id for x in sel.excluded if not x.find.voided])
        rows[name] = _write_csv(tmp / f"{name}.csv", name, [
            r.as_dict(names) for r in count_rows(tallies, units, horizons, vols, by_unit=by_unit)])
    return rows


def _withheld(sel: Selection, hidden: Withheld) -> Selection:
    """The selection as every exported file shows it: finds flagged as possible human remains without their
    position, and the checks that quote it without their numbers (``schema.withholding``)."""
    def check(x: Excluded) -> Excluded:
        row = hidden.issue({"code": x.code, "record": "find", "record_id": x.find.id, "label": f"find {x.find.number}",
                            "message": x.message})
        return Excluded(hidden.blanked(x.find), x.code, row["message"])

    return Selection([hidden.blanked(f) for f in sel.included], [check(x) for x in sel.excluded], sel.issue_codes)


def export_zip(store: ServerStore, work: Path, *, seasons: list[str] | None = None, strict: bool = False) -> Path:
    """Run an export into ``work`` and pack it as ``work/baulk-export.zip`` (for the API and the camp pages)."""
    import zipfile

    out = work / "export"
    run_export(store, out, seasons=seasons, strict=strict)
    archive = work / "baulk-export.zip"
    with zipfile.ZipFile(archive, "w", compression=zipfile.ZIP_DEFLATED) as z:
        for p in sorted(out.iterdir()):
            z.write(p, arcname=f"baulk-export/{p.name}")
    return archive
