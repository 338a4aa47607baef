"""``baulk export``: the analyst's files for chosen seasons, written into one folder and described by a manifest.

Files (every CSV is described by ``datapackage.json``, a Frictionless Data Package):
- ``finds.csv``: the finds counted, with season, trench, unit, horizon, every recorded field and, outside strict
  mode, their open issue codes, their unit's error codes and their open conflicts;
- ``excluded.csv``: every find left out, with the rule code, its scope and message (voided finds always; in strict
  mode every find an error-severity check names, whose unit such a check names, or with an open conflict);
- ``counts_by_horizon.csv`` and ``counts_by_unit.csv``: finds and items per horizon (unit) x category x
  material x recovery, weights, excavated m3 and sieved L, densities of bags and of items per m3 and per 10 L;
- ``volumes.csv``: excavated and sieved volume per unit, from its spits or surfaces (none for a cut), and the
  units whose volume shares space with it;
- every record as a table with keys that join, ``horizons.csv`` with age brackets, ``codebook.csv`` and a
  ``README.md`` (``sync_server/export_records.py``);
- ``dwc_occurrence.csv``: Darwin Core occurrences of the fossil finds, coordinates in WGS 84;
- ``dwc_archive.zip``: the same occurrences as a Darwin Core Archive (meta.xml, eml.xml, occurrence core);
- ``finds.gpkg``: GeoPackage in the site's CRS: finds (points with Z), trenches (polygons), level points;
- ``harris_matrix.svg`` / ``.png`` (reduced, layered, coloured by horizon, problem units outlined) and, per
  trench, ``plan_<trench>.png`` and ``section_<trench>.png`` of the plotted finds coloured by horizon;
- ``manifest.json``: counts, validation state, software version and the SHA-256 of every file.

The same store gives the same bytes: rows are sorted, ``datapackage.json``'s ``created`` is the newest exported
find's time, pictures and the GeoPackage are written with a fixed date; only the manifest's ``created`` is the
time of the export.

Finds flagged as possible human remains never carry a precise location in any file (``location_withheld``).
Files are written into a temporary folder and moved into place at the end, so a failed export leaves no half
set. The counting itself is ``schema.analysis``; this module reads the store and writes files.
"""

from __future__ import annotations

import contextlib
import csv
import datetime as dt
import hashlib
import json
import os
import shutil
import threading
import uuid
from collections import Counter
from pathlib import Path
from typing import Any, Callable

from schema import __version__
from schema.analysis import (
    Excluded, Selection, Volume, count_rows, select_finds, unit_errors, unit_volumes, volume_overlaps,
)
from schema.dwc import DWC_TERMS
from schema.errors import RecordNotFound
from schema.records import (
    AgeDetermination, ControlPoint, Find, GnssFix, Horizon, LevelPoint, Sample, Season, Shot, Site, Spit,
    StationSetup, Trench, Unit,
)
from schema.strata.dating import bracket_units, horizon_age_brackets
from schema.strata.graph import strongly_connected
from schema.strata.validate import validate
from schema.tabular import record_columns, record_row
from schema.vocab import MATERIALS
from schema.withholding import Withheld, withheld

from .export_ages import AGE_RESOURCES
from .export_photos import PHOTO_RESOURCES, find_media, write_photo_files
from .export_records import RECORD_RESOURCES, codebook_rows, readme, record_tables
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
        ("season", "string", "season label", _ID),
        ("unit_errors", "string", "error-severity check codes on the find's unit (matrix cycle, fill below its cut, "
                                  "horizon order...), space-separated (empty in strict mode)", {}),
        ("conflicts", "string", "open conflicts on the find (find.<field>) or its unit (unit.<field>), "
                                "space-separated (empty in strict mode)", {}),
    ], ["id"], [{"fields": ["season"], "reference": {"resource": "seasons", "fields": ["label"]}},
                {"fields": ["trench"], "reference": {"resource": "trenches", "fields": ["code"]}},
                {"fields": ["unit"], "reference": {"resource": "units", "fields": ["code"]}},
                {"fields": ["horizon"], "reference": {"resource": "horizons", "fields": ["code"]}}]),
    "excluded": ("Finds left out of the tables, each with the rule that left it out", [
        ("id", "string", "find id (UUID)", _ID), ("number", "integer", "site find number", _ID),
        ("trench", "string", "trench code", _ID), ("unit", "string", "unit code", _ID),
        ("code", "string", "rule code (VOIDED, or a check code from the validation catalogue)", _ID),
        ("message", "string", "why, in words", _ID),
        ("applies_to", "string", "what the reason is about: void, find (a check on the find), unit (a check on its "
                                 "unit) or conflict (an open conflict on the find or its unit)",
         {"enum": ["void", "find", "unit", "conflict"]}),
    ], ["id"], []),
    "volumes": ("Excavated and sieved volume per unit, from its spits or its surfaces; a cut has none of its own", [
        ("unit", "string", "unit code", _ID), ("horizon", "string", "horizon code", {}),
        ("spits", "integer", "spits recorded", {"required": True, "minimum": 0}),
        ("volume_from", "string", "spits, surfaces (top and bottom level points over the trench outline), or cut "
                                  "(a cut has no volume of its own: its fill carries it)",
         {"enum": ["spits", "surfaces", "cut"]}),
        ("excavated_m3", "number", "excavated volume, m3 (area x thickness summed over spits)", {"minimum": 0}),
        ("sieved_l", "number", "sieved volume, litres", {"minimum": 0}),
        ("kind", "string", "unit kind", {"enum": ["deposit", "fill", "cut", "structure"]}),
        ("overlaps", "string", "units of the same trench whose volume shares space with this one: code:m3, "
                               "space-separated (their volumes count that earth twice until corrected)", {}),
    ], ["unit"], [{"fields": ["unit"], "reference": {"resource": "units", "fields": ["code"]}}]),
}
_COUNT_FIELDS = [
    ("category", "string", "artifact, fossil or sample", _ID), ("material", "string", "material", _ID),
    ("recovery", "string", "plotted, sieved, surface or core (counted apart)", _ID),
    ("finds", "integer", "finds (bags)", {"required": True, "minimum": 1}),
    ("items", "integer", "items (sum of the finds' counts)", {"required": True, "minimum": 1}),
    ("weight_g", "number", "sum of recorded weights, g; empty when none was weighed", {"minimum": 0}),
    ("excavated_m3", "number", "excavated volume of the horizon (unit), m3", {"minimum": 0}),
    ("sieved_l", "number", "sieved volume of the horizon (unit), L", {"minimum": 0}),
    ("per_m3", "number", "finds (bags) per m3 excavated: the same as bags_per_m3", {"minimum": 0}),
    ("per_10l", "number", "finds (bags) per 10 L sieved (sieved finds only): the same as bags_per_10l", {"minimum": 0}),
    ("bags_per_m3", "number", "finds (bags) per m3 excavated", {"minimum": 0}),
    ("items_per_m3", "number", "items (pieces in the bags) per m3 excavated", {"minimum": 0}),
    ("bags_per_10l", "number", "finds (bags) per 10 L sieved (sieved finds only)", {"minimum": 0}),
    ("items_per_10l", "number", "items (pieces in the bags) per 10 L sieved (sieved finds only)", {"minimum": 0}),
]
RESOURCES["counts_by_horizon"] = ("Finds per horizon x category x material x recovery", [
    ("horizon", "string", "horizon code; empty for units with no horizon", {}), *_COUNT_FIELDS,
], ["horizon", "category", "material", "recovery"], [])
RESOURCES["counts_by_unit"] = ("Finds per unit x category x material x recovery", [
    ("horizon", "string", "horizon code of the unit", {}), ("unit", "string", "unit code", _ID), *_COUNT_FIELDS,
], ["unit", "category", "material", "recovery"],
    [{"fields": ["unit"], "reference": {"resource": "volumes", "fields": ["unit"]}}])
RESOURCES["counts_by_horizon"][3].append({"fields": ["horizon"], "reference": {"resource": "horizons", "fields": ["code"]}})
_SHOWN = {f[0] for f in RESOURCES["finds"][1]}
RESOURCES["finds"][1].extend(  # every other recorded field of a find, typed from the model
    c for c in record_columns("find", drop=("site_id", "human_remains", "voided", "void_reason")) if c[0] not in _SHOWN)
RESOURCES["finds"][3].extend([{"fields": [k], "reference": {"resource": r, "fields": ["id"]}}
                              for k, r in (("spit_id", "spits"), ("shot_id", "shots"), ("gnss_fix_id", "gnss_fixes"))])
RESOURCES.update(RECORD_RESOURCES)  # seasons ... horizons, codebook: sync_server/export_records.py
RESOURCES["dwc_occurrence"] = ("Darwin Core occurrences of the fossil finds (coordinates WGS 84)",
                               [(t, ty, d, c) for t, ty, d, c in DWC_TERMS], ["occurrenceID"], [])
RESOURCES.update(AGE_RESOURCES)  # ages_by_horizon, ages_by_unit, ages_by_find, ranges: sync_server/export_ages.py
RESOURCES.update(PHOTO_RESOURCES)  # photo_register (and the photos/ folder): sync_server/export_photos.py


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


def _datapackage(site: Site, described: dict[str, Any] | None = None, *, created: str | None = None) -> dict[str, Any]:
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
            "profile": "tabular-data-package",
            "created": created or dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "resources": resources}


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def run_export(store: ServerStore, out: Path, *, seasons: list[str] | None = None, strict: bool = False,
               progress: Progress | None = None, photos_dir: Path | None = None) -> dict[str, Any]:
    """Write every export file into ``out`` (created; files of an earlier export there are replaced). The files
    are made in ``out.part`` first, so an output folder that cannot be written is refused before any work, and a
    failed export leaves nothing behind."""
    out = Path(out)
    tmp = out.with_name(out.name + ".part")
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir(parents=True)
    try:
        return _export_into(store, out, tmp, seasons=seasons, strict=strict, progress=progress,
                            photos_dir=photos_dir)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)  # renamed to ``out`` when the export is whole


def _export_into(store: ServerStore, out: Path, tmp: Path, *, seasons: list[str] | None, strict: bool,
                 progress: Progress | None, photos_dir: Path | None = None) -> dict[str, Any]:
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
    finds = sorted((f for f in store.list(Find, site_id=site.id) if f.season_id in season_ids),
                   key=lambda f: (f.number, str(f.id)))
    units, horizons = data.units, store.list(Horizon, site_id=site.id)
    cycles = [[u for g in comp for u in report.matrix.members[g]]
              for comp in strongly_connected(report.matrix.members, report.matrix.edges) if len(comp) > 1]
    doubted = unit_errors(report.issues, cyclic_units=cycles, relations=data.relations)
    conflicts = _open_conflicts(store)
    samples = store.list(Sample)
    hidden = withheld("export", finds, samples)
    sel = _withheld(select_finds(finds, report.issues, strict=strict, units=doubted, conflicts=conflicts,
                                 unit_codes={u.id: u.code for u in units}), hidden)
    unit_ids = {u.id for u in units}
    spits = [s for s in store.list(Spit) if s.unit_id in unit_ids]
    levels = [lp for lp in store.list(LevelPoint) if lp.unit_id in unit_ids]
    outlines = {t.id: list(t.outline) for t in data.trenches}
    volumes = unit_volumes(spits, units=units, levels=levels, outlines=outlines)
    overlaps = volume_overlaps(spits, units=units, levels=levels, outlines=outlines)
    rows = _tables(store, tmp, site, season_ids, data.trenches, units, horizons, spits, volumes, sel, say,
                   seasons=chosen, overlaps=overlaps)
    say("writing every record as a table, the horizons with their age brackets, the codebook")
    brackets = bracket_units(report.matrix, data.ages, horizons)
    record_rows = record_tables(
        seasons=store.list(Season, site_id=site.id), trenches=data.trenches,
        control_points=store.list(ControlPoint, site_id=site.id), units=units, relations=data.relations,
        matrix=report.matrix, spits=spits, samples=samples, finds=sel.included,
        ages=store.list(AgeDetermination, site_id=site.id), levels=levels,
        setups=store.list(StationSetup, site_id=site.id),
        shots=_site_shots(store, {s.id for s in store.list(StationSetup, site_id=site.id)}),
        fixes=store.list(GnssFix, site_id=site.id), horizons=horizons, brackets=brackets,
        horizon_brackets=horizon_age_brackets(brackets, report.matrix, horizons), unit_errors=doubted, hidden=hidden)
    recorders = {f.recorder for f in finds} | {u.recorder for u in units}
    record_rows["codebook"] = codebook_rows(RESOURCES, recorders, MATERIALS)
    record_rows["photo_register"] = write_photo_files(store, tmp, finds=sel.included, all_finds=finds, units=units,
                                                      trenches=data.trenches, photos_dir=photos_dir)  # photos/ too
    for name, table in record_rows.items():
        rows[name] = _write_csv(tmp / f"{name}.csv", name, table)
    grid = site.grid  # site grid -> CRS; without it the GeoPackage stays in grid metres, with no CRS
    say("modelling the ages of the horizons and the ranges of the finds")
    from .export_ages import compute_ages, draw_age_pictures, write_age_files

    ages = compute_ages(data, sel.included, matrix=report.matrix)
    rows.update(write_age_files(ages, tmp))
    say("writing Darwin Core occurrences (table and archive) and the GeoPackage")
    from . import export_geo  # the Darwin Core rows, archive and GeoPackage: export_geo.py, export_dwca.py
    from .export_dwca import write_archive

    occurrences = export_geo.dwc_rows(site, grid, data.trenches, units, horizons, sel, spits=spits,
                                      horizon_ages=export_geo.age_brackets(ages),
                                      media=find_media(record_rows["photo_register"]))
    rows["dwc_occurrence"] = _write_csv(tmp / "dwc_occurrence.csv", "dwc_occurrence", occurrences)
    write_archive(tmp / "dwc_archive.zip", site, occurrences, seasons=sorted(s.label for s in chosen))
    newest = max((f.found_at for f in finds), default=None)
    (tmp / "datapackage.json").write_text(json.dumps(_datapackage(site, created=_cell(newest) if newest else
                                                                  "1970-01-01T00:00:00Z"), indent=2))
    with _fixed_dates():  # the same store, the same bytes (GDAL and matplotlib write no clock time)
        layers = export_geo.write_geopackage(tmp / "finds.gpkg", site, grid, data.trenches, sel.included, levels,
                                             units=units, horizons=horizons, seasons=chosen)
    say("drawing the Harris matrix and the trench plans and sections")
    from .export_pictures import draw_matrix, draw_trench_plots

    problems = {uuid.UUID(i.record_id) for i in report.issues if i.record == "unit" and i.record_id}
    with _fixed_dates():
        pictures = draw_matrix(report.matrix, horizons, problems, tmp)
        pictures += draw_trench_plots(data.trenches, units, horizons, sel.included, tmp, levels=levels)
        pictures += draw_age_pictures(ages, data, tmp)
    names = sorted([p.name for p in tmp.iterdir()] + ["README.md", "manifest.json"])
    (tmp / "README.md").write_text(readme(site.name, RESOURCES, record_rows["codebook"], names), encoding="utf-8")
    live = [f for f in finds if not f.voided]
    manifest = {
        "software": f"baulk {__version__}", "site": site.code, "seasons": sorted(s.label for s in chosen),
        "strict": strict, "created": dt.datetime.now(dt.timezone.utc).isoformat(),
        "crs": f"EPSG:{site.crs_epsg}" if grid else None,
        "crs_note": None if grid else "the site grid is not tied to a CRS yet (fit it from control points): the "
                                      "GeoPackage is in site grid metres and Darwin Core rows carry no coordinates",
        "counts": {"finds_total": len(finds), "finds_included": len(sel.included), "finds_excluded": len(sel.excluded),
                   "locations_withheld": sum(1 for f in sel.included if f.human_remains),
                   "finds_with_open_conflicts": sum(1 for f in live if ("find", str(f.id)) in conflicts
                                                    or ("unit", str(f.unit_id)) in conflicts),
                   "finds_with_unit_errors": sum(1 for f in live if f.unit_id in doubted),
                   "finds_in_matrix_cycles": sum(1 for f in live if f.unit_id in brackets.cyclic),
                   "excluded_by_reason": dict(sorted(Counter(x.applies_to for x in sel.excluded).items())),
                   "excluded_by_code": dict(sorted(Counter(x.code for x in sel.excluded).items())),
                   "rows": rows, "geopackage_layers": layers, "pictures": [p.name for p in pictures]},
        "validation": {**report.counts(), "checked_finds": report.finds_checked},
        "files": {},
    }
    for p in sorted(q for q in tmp.rglob("*") if q.is_file()):  # photos/ included
        manifest["files"][p.relative_to(tmp).as_posix()] = {"sha256": _sha256(p), "bytes": p.stat().st_size}
    (tmp / "manifest.json").write_text(json.dumps(manifest, indent=2))
    if out.exists():
        shutil.rmtree(out)
    tmp.replace(out)
    say(f"wrote {len(manifest['files']) + 1} files into {out}")
    return manifest


def _tables(store: ServerStore, tmp: Path, site: Site, season_ids: set[Any], trenches: list[Trench], units: list[Unit],
            horizons: list[Horizon], spits: list[Spit], vols: dict[Any, Volume], sel: Selection,
            say: Progress, *, seasons: list[Season], overlaps: dict[Any, dict[Any, float]]) -> dict[str, int]:
    unit_by_id = {u.id: u for u in units}
    trench_code = {t.id: t.code for t in trenches}
    horizon_code = {h.id: h.code for h in horizons}
    spit_number = {s.id: s.number for s in spits}
    season_label = {s.id: s.label for s in seasons}

    def where(f: Find) -> dict[str, Any]:
        u = unit_by_id.get(f.unit_id)
        return {"trench": trench_code.get(f.trench_id, str(f.trench_id)), "unit": u.code if u else str(f.unit_id),
                "horizon": horizon_code.get(u.horizon_id) if u and u.horizon_id else None}

    say(f"writing {len(sel.included)} finds and {len(sel.excluded)} left out")
    found = []
    for f in sel.included:  # possible human remains come blanked (_withheld): no position in any file
        found.append({**record_row(f, RESOURCES["finds"][1]), **where(f),
                      "spit": spit_number.get(f.spit_id) if f.spit_id else None, "found_at": f.found_at,
                      "location_withheld": f.human_remains, "id": str(f.id), "season": season_label.get(f.season_id),
                      "issues": " ".join(sel.issue_codes.get(f.id, [])),
                      "unit_errors": " ".join(sel.unit_errors.get(f.id, [])),
                      "conflicts": " ".join(sel.conflicts.get(f.id, []))})
    rows = {"finds": _write_csv(tmp / "finds.csv", "finds", found)}
    rows["excluded"] = _write_csv(tmp / "excluded.csv", "excluded", [
        {"id": str(x.find.id), "number": x.find.number, **where(x.find), "code": x.code, "message": x.message,
         "applies_to": x.applies_to} for x in sel.excluded])
    code = {u.id: u.code for u in units}
    rows["volumes"] = _write_csv(tmp / "volumes.csv", "volumes", [
        {"unit": u.code, "horizon": horizon_code.get(u.horizon_id) if u.horizon_id else None,
         "spits": vols[u.id].spits if u.id in vols else 0,
         "volume_from": ("spits" if vols[u.id].spits else "surfaces") if u.id in vols else
                        ("cut" if u.kind == "cut" else None),
         "excavated_m3": round(vols[u.id].excavated_m3, 6) if u.id in vols else None,
         "sieved_l": round(vols[u.id].sieved_l, 3) if u.id in vols and vols[u.id].spits else None, "kind": u.kind,
         "overlaps": " ".join(f"{code[o]}:{m3:.3f}" for o, m3 in sorted(overlaps.get(u.id, {}).items(),
                                                                          key=lambda kv: code[kv[0]]))}
        for u in units])
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
        return Excluded(hidden.blanked(x.find), x.code, row["message"], x.applies_to)

    return Selection([hidden.blanked(f) for f in sel.included], [check(x) for x in sel.excluded], sel.issue_codes,
                     sel.unit_errors, sel.conflicts)


def _open_conflicts(store: ServerStore) -> dict[tuple[str, str], list[str]]:
    """Open conflicts on finds and units: (record, record id) -> field names (with the kind when not a plain
    concurrent edit)."""
    import sqlalchemy as sa

    from schema.sync.tables import open_conflict

    out: dict[tuple[str, str], list[str]] = {}
    with store.read() as conn:
        for r in conn.execute(sa.select(open_conflict.c.record, open_conflict.c.record_id, open_conflict.c.field,
                                        open_conflict.c.kind).where(open_conflict.c.record.in_(("find", "unit")))):
            name = r.field if r.kind == "concurrent" else f"{r.field}({r.kind})"
            out.setdefault((r.record, str(r.record_id)), []).append(name)
    return {k: sorted(v) for k, v in out.items()}


def _site_shots(store: ServerStore, setup_ids: set[Any]) -> list[Shot]:
    return [s for s in store.list(Shot) if s.setup_id in setup_ids]


@contextlib.contextmanager
def _fixed_dates() -> Any:
    """While pictures and the GeoPackage are written: matplotlib's SVG date from ``SOURCE_DATE_EPOCH`` and a
    fixed SVG id salt, GDAL's GeoPackage timestamps from ``OGR_CURRENT_DATE`` (both documented by their
    projects for reproducible output), so the same store gives the same bytes. Restored afterwards. The settings
    are process-wide, so one lock holds them for one export at a time: two exports in one server process never
    see each other's restore halfway through."""
    import matplotlib

    with _FIXED_DATES_LOCK:
        yield from _fixed_dates_held(matplotlib)


_FIXED_DATES_LOCK = threading.RLock()


def _fixed_dates_held(matplotlib: Any) -> Any:
    saved = {k: os.environ.get(k) for k in ("SOURCE_DATE_EPOCH", "OGR_CURRENT_DATE")}
    os.environ["SOURCE_DATE_EPOCH"] = "0"
    os.environ["OGR_CURRENT_DATE"] = "2000-01-01T00:00:00.000Z"
    salt = matplotlib.rcParams["svg.hashsalt"]
    matplotlib.rcParams["svg.hashsalt"] = "baulk"
    try:
        yield
    finally:
        matplotlib.rcParams["svg.hashsalt"] = salt
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def export_zip_to_send(store: ServerStore, *, seasons: list[str] | None = None, strict: bool = False,
                       photos_dir: Path | None = None) -> tuple[Path, Path]:
    """``export_zip`` in a new temporary folder, for a download: the archive and the folder, which the caller
    removes once the archive is sent. An export that fails removes its folder before the error goes on (a refused
    strict export leaves nothing behind in the system's temporary folder)."""
    import tempfile

    work = Path(tempfile.mkdtemp(prefix="baulk-export-"))
    try:
        return export_zip(store, work, seasons=seasons, strict=strict, photos_dir=photos_dir), work
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise


def export_zip(store: ServerStore, work: Path, *, seasons: list[str] | None = None, strict: bool = False,
               photos_dir: Path | None = None) -> Path:
    """Run an export into ``work`` and pack it as ``work/baulk-export.zip`` (for the API and the camp pages)."""
    import zipfile

    out = work / "export"
    run_export(store, out, seasons=seasons, strict=strict, photos_dir=photos_dir)
    archive = work / "baulk-export.zip"
    with zipfile.ZipFile(archive, "w", compression=zipfile.ZIP_DEFLATED) as z:
        for p in sorted(q for q in out.rglob("*") if q.is_file()):  # a fixed entry time: the same export, the same zip
            info = zipfile.ZipInfo(f"baulk-export/{p.relative_to(out).as_posix()}", date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type, info.external_attr = zipfile.ZIP_DEFLATED, 0o644 << 16
            z.writestr(info, p.read_bytes())
    return archive
