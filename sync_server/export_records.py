"""The record tables of the analyst's export, its horizons table with age brackets, and its codebook.

Every record the analyst needs to redo the work is written as a table whose columns derive from the record model
(``schema.tabular.record_columns``), with the codes of what it names beside the ids, so tables join on codes
(unit ``101``, trench ``TR1``, season ``2026``: typed as strings in the data package) as well as on ids:

- ``seasons``, ``trenches`` (outline area), ``control_points``, ``units`` (trench and horizon codes, same-as
  group, matrix cycle, unit-level errors), ``relations`` (unit codes), ``reduced_matrix`` (the transitive
  reduction, outside any cycle), ``spits`` (volume), ``samples`` (of the finds exported), ``laboratory_dates``,
  ``level_points`` (unit code), ``station_setups``, ``shots`` and ``gnss_fixes`` (raw observations: coordinates
  can be recomputed);
- ``horizons``: code, label, order, lithostratigraphic names, units, and the age bracket with the dated units it
  rests on, or the reason there is none (``schema.strata.dating``);
- ``codebook``: every check code with its severity and meaning, the export's own codes, every vocabulary term
  with its label, the recorders' initials; the same, with every table's columns, as ``README.md``.

The shots and GNSS fixes that place possible human remains are left out, and their samples' depths blanked
(``schema.withholding``). ``--seasons`` chooses finds (and so samples); the site's other records are written
whole, since units, relations and surveys carry across seasons.
"""

from __future__ import annotations

import uuid
from collections import defaultdict
from typing import Any, Iterable

from schema.analysis import outline_area_m2, spit_volume_m3
from schema.records import (
    AgeDetermination, ControlPoint, Find, GnssFix, Horizon, LevelPoint, Relation, Sample, Season, Shot, Spit,
    StationSetup, Trench, Unit,
)
from schema.strata.dating import Brackets, HorizonBracket
from schema.strata.graph import strongly_connected, transitive_reduction
from schema.strata.issues import CATALOGUE, Issue
from schema.strata.matrix import Matrix
from schema.tabular import Column, record_columns, record_row
from schema.withholding import Withheld

__all__ = ["EXPORT_CODES", "RECORD_RESOURCES", "codebook_rows", "readme", "record_tables"]

Resource = tuple[str, list[Column], list[str], list[dict[str, Any]]]
_REQ = {"required": True}


def _fk(field: str, resource: str, ref: str) -> dict[str, Any]:
    return {"fields": [field], "reference": {"resource": resource, "fields": [ref]}}


def _unit_code(what: str = "unit (context) code") -> Column:
    return ("unit", "string", what, _REQ)


# Codes the export itself writes (not validation checks): in excluded.csv and finds.csv.
EXPORT_CODES: dict[str, str] = {
    "VOIDED": "the find was voided (records are voided, never deleted): always left out, with the void's reason",
    "CONFLICT": "a field of the find or of its unit has two or more current values (an open conflict): listed in "
                "finds.csv's conflicts column; --strict leaves the find out until a data manager resolves it",
}

RECORD_RESOURCES: dict[str, Resource] = {
    "seasons": ("Seasons", [*record_columns("season")], ["id"], []),
    "trenches": ("Trenches, with their outline in site grid metres", [
        ("seasons", "string", "labels of the seasons it was open, space-separated", {}),
        ("area_m2", "number", "area of the outline, m2 (shoelace formula)", {"minimum": 0}),
        *record_columns("trench")], ["id"], []),
    "control_points": ("Control points (site datum): grid E/N/Z and CRS E/N", [*record_columns("control_point")],
                       ["id"], []),
    "units": ("Stratigraphic units (contexts)", [
        ("trench", "string", "trench code", _REQ), ("horizon", "string", "horizon code; empty when unassigned", {}),
        ("matrix_group", "string", "the unit's same-as group in the matrix, e.g. 102=204=302", _REQ),
        ("in_cycle", "boolean", "caught in a circle of relations (MATRIX_CYCLE): its place in the sequence is in "
                                "doubt", _REQ),
        ("unit_errors", "string", "error-severity check codes on the unit (its own, its cycle's, its relations'), "
                                  "space-separated", {}),
        ("youngest_ka", "number", "youngest age the dated units above it allow (ka, two-sigma; see horizons)", {}),
        ("oldest_ka", "number", "oldest age the dated units below it allow (ka, two-sigma)", {}),
        *record_columns("unit")], ["id"], [_fk("trench", "trenches", "code"), _fk("horizon", "horizons", "code")]),
    "relations": ("Relations between units as recorded (later unit first)", [
        ("upper_unit", "string", "code of the later (upper) unit", _REQ),
        ("lower_unit", "string", "code of the earlier (lower) unit", _REQ),
        *record_columns("relation")], ["id"],
        [_fk("upper_unit", "units", "code"), _fk("lower_unit", "units", "code")]),
    "reduced_matrix": ("The reduced Harris matrix: the fewest 'later than' edges with the same order (outside any "
                       "cycle), between same-as groups", [
        ("upper_unit", "string", "first unit code of the later group", _REQ),
        ("lower_unit", "string", "first unit code of the earlier group", _REQ),
        ("upper_group", "string", "the later group's units, e.g. 102=204=302", _REQ),
        ("lower_group", "string", "the earlier group's units", _REQ)], ["upper_group", "lower_group"],
        [_fk("upper_unit", "units", "code"), _fk("lower_unit", "units", "code")]),
    "spits": ("Spits (arbitrary levels dug within a unit)", [
        _unit_code(), ("volume_m3", "number", "area x thickness, m3", {"minimum": 0}),
        *record_columns("spit")], ["id"], [_fk("unit", "units", "code"), _fk("unit_id", "units", "id")]),
    "samples": ("Sample details of the sample finds exported", [
        ("find_number", "integer", "the sample find's number", _REQ), *record_columns("sample")], ["id"],
        [_fk("find_id", "finds", "id")]),
    "laboratory_dates": ("Laboratory dates on units (ka, one sigma)", [
        _unit_code(), ("find_number", "integer", "number of the dated sample find, when given", {}),
        *record_columns("age_determination")], ["id"], [_fk("unit", "units", "code"), _fk("unit_id", "units", "id")]),
    "level_points": ("Level points: the units' top and bottom surfaces (site grid, site datum)", [
        _unit_code(), *record_columns("level_point")], ["id"],
        [_fk("unit", "units", "code"), _fk("unit_id", "units", "id")]),
    "station_setups": ("Total-station setups (occupied or resected), with residuals", [
        ("occupied_point", "string", "control point code of an occupied station", {}),
        *record_columns("station_setup")], ["id"], []),
    "shots": ("Raw total-station observations (recompute coordinates from these and their setup)", [
        *record_columns("shot")], ["id"], [_fk("setup_id", "station_setups", "id")]),
    "gnss_fixes": ("Raw GNSS fixes with their NMEA sentences", [*record_columns("gnss_fix")], ["id"], []),
    "horizons": ("Horizons with their units and age brackets", [
        ("id", "string", "horizon id (UUID)", {"required": True, "unique": True}),
        ("code", "string", "horizon code", {"required": True, "unique": True}),
        ("label", "string", "horizon label", {}), ("order", "integer", "position from the top, 1 = uppermost", _REQ),
        ("formation", "string", "lithostratigraphic formation", {}), ("member", "string", "member", {}),
        ("bed", "string", "bed", {}),
        ("age_min_ka", "number", "youngest age as recorded by the data manager (ka)", {}),
        ("age_max_ka", "number", "oldest age as recorded by the data manager (ka)", {}),
        ("units", "string", "unit codes in the horizon, space-separated", {}),
        ("youngest_ka", "number", "bracket: youngest age (ka) its units and the horizon order allow, the horizon "
                                  "taken as one layer (two-sigma date ranges)", {}),
        ("oldest_ka", "number", "bracket: oldest age (ka)", {}),
        ("youngest_from", "string", "dated units the youngest limit rests on: unit (lab code age +- sigma ka)", {}),
        ("oldest_from", "string", "dated units the oldest limit rests on", {}),
        ("dated_units", "string", "units of the horizon with a date of their own", {}),
        ("bracket_note", "string", "why there is no bracket (or no limit on one side), or what was left out", {}),
    ], ["id"], []),
    "codebook": ("Every code in these files: check codes with severity and meaning, the export's own codes, "
                 "vocabulary terms with labels, recorders' initials", [
        ("kind", "string", "check, export, vocabulary:<table>.<column> (the first column holding those terms), "
                           "vocabulary:material:<category>, or recorder", _REQ),
        ("code", "string", "the code as it appears in the files", _REQ),
        ("label", "string", "a readable label", {}),
        ("severity", "string", "error, warning or info (checks)", {"enum": ["error", "warning", "info"]}),
        ("meaning", "string", "what it means", {})], ["kind", "code"], []),
}


def _row(record: Any, name: str, **extra: Any) -> dict[str, Any]:
    return {**record_row(record, RECORD_RESOURCES[name][1]), **extra}


def _dates_text(units: Iterable[uuid.UUID], code: dict[uuid.UUID, str], ages: list[AgeDetermination]) -> str:
    by_unit: dict[uuid.UUID, list[AgeDetermination]] = defaultdict(list)
    for a in ages:
        by_unit[a.unit_id].append(a)
    parts = []
    for u in sorted(units, key=lambda u: code.get(u, str(u))):
        for a in sorted(by_unit.get(u, []), key=lambda a: (a.lab_code or "", str(a.id))):
            parts.append(f"{code.get(u, str(u))} ({a.lab_code + ' ' if a.lab_code else ''}{a.age_ka:g} +- {a.sigma_ka:g} ka)")
    return "; ".join(parts)


def _matrix_rows(matrix: Matrix) -> list[dict[str, Any]]:
    """The reduced matrix; while relations go round in a circle, of the matrix without the relations inside the
    circle (the circle's groups keep their order to the rest)."""
    reduced = matrix.reduced
    if reduced is None:
        edges = set(matrix.edges)
        for comp in strongly_connected(matrix.members, matrix.edges):
            inside = set(comp)
            if len(inside) > 1:
                edges = {(a, b) for a, b in edges if not (a in inside and b in inside)}
        reduced = transitive_reduction(matrix.members, edges)
    first = {g: sorted(matrix.units[u].code for u in m)[0] for g, m in matrix.members.items()}
    rows = [{"upper_unit": first[a], "lower_unit": first[b], "upper_group": matrix.label(a),
             "lower_group": matrix.label(b)} for a, b in reduced]
    return sorted(rows, key=lambda r: (r["upper_group"], r["lower_group"]))


def record_tables(*, seasons: list[Season], trenches: list[Trench], control_points: list[ControlPoint],
                  units: list[Unit], relations: list[Relation], matrix: Matrix, spits: list[Spit],
                  samples: list[Sample], finds: list[Find], ages: list[AgeDetermination], levels: list[LevelPoint],
                  setups: list[StationSetup], shots: list[Shot], fixes: list[GnssFix], horizons: list[Horizon],
                  brackets: Brackets, horizon_brackets: dict[uuid.UUID, HorizonBracket],
                  unit_errors: dict[uuid.UUID, list[Issue]], hidden: Withheld) -> dict[str, list[dict[str, Any]]]:
    """The rows of every record table (pure: records in, rows out), sorted by their codes or numbers."""
    code = {u.id: u.code for u in units}
    trench_code = {t.id: t.code for t in trenches}
    horizon_code = {h.id: h.code for h in horizons}
    season_label = {s.id: s.label for s in seasons}
    find_number = {f.id: f.number for f in finds}
    cp_code = {c.id: c.code for c in control_points}
    out: dict[str, list[dict[str, Any]]] = {}
    out["seasons"] = [_row(s, "seasons") for s in sorted(seasons, key=lambda s: (s.starts_on, s.label))]
    out["trenches"] = [_row(t, "trenches", seasons=" ".join(season_label.get(s, str(s)) for s in t.seasons_opened),
                            area_m2=round(outline_area_m2(list(t.outline)), 6))
                       for t in sorted(trenches, key=lambda t: t.code)]
    out["control_points"] = [_row(c, "control_points") for c in sorted(control_points, key=lambda c: c.code)]
    out["units"] = []
    for u in sorted(units, key=lambda u: u.code):
        b = brackets.units.get(u.id)
        out["units"].append(_row(
            u, "units", trench=trench_code.get(u.trench_id), horizon=horizon_code.get(u.horizon_id) if u.horizon_id else None,
            matrix_group=matrix.label(matrix.group_of[u.id]), in_cycle=u.id in brackets.cyclic,
            unit_errors=" ".join(sorted({i.code for i in unit_errors.get(u.id, [])})),
            youngest_ka=b.youngest if b else None, oldest_ka=b.oldest if b else None))
    out["relations"] = sorted(
        (_row(r, "relations", upper_unit=code.get(r.upper_unit_id), lower_unit=code.get(r.lower_unit_id))
         for r in relations), key=lambda r: (r["upper_unit"] or "", r["lower_unit"] or "", r["kind"], r["id"]))
    out["reduced_matrix"] = _matrix_rows(matrix)
    out["spits"] = [_row(s, "spits", unit=code.get(s.unit_id), volume_m3=round(spit_volume_m3(s), 6))
                    for s in sorted(spits, key=lambda s: (code.get(s.unit_id, ""), s.number))]
    exported = set(find_number)
    out["samples"] = []
    for s in sorted((s for s in samples if s.find_id in exported), key=lambda s: find_number[s.find_id]):
        if s.id in hidden.samples:
            s = s.model_copy(update={"top_z": None, "bottom_z": None})
        out["samples"].append(_row(s, "samples", find_number=find_number[s.find_id]))
    out["laboratory_dates"] = [
        _row(a, "laboratory_dates", unit=code.get(a.unit_id), find_number=find_number.get(a.find_id) if a.find_id else None)
        for a in sorted(ages, key=lambda a: (code.get(a.unit_id, ""), a.lab_code or "", str(a.id)))]
    out["level_points"] = [_row(p, "level_points", unit=code.get(p.unit_id))
                           for p in sorted(levels, key=lambda p: (code.get(p.unit_id, ""), p.surface, p.e, p.n, str(p.id)))]
    out["station_setups"] = [_row(s, "station_setups", occupied_point=cp_code.get(s.occupied_point_id)
                                  if s.occupied_point_id else None)
                             for s in sorted(setups, key=lambda s: (s.set_up_at, str(s.id)))]
    out["shots"] = [_row(s, "shots") for s in sorted(shots, key=lambda s: (s.shot_at, str(s.id)))
                    if ("shot", s.id) not in hidden.observations]
    out["gnss_fixes"] = [_row(x, "gnss_fixes") for x in sorted(fixes, key=lambda x: (x.fixed_at, str(x.id)))
                         if ("gnss_fix", x.id) not in hidden.observations]
    out["horizons"] = _horizon_rows(horizons, units, ages, horizon_brackets, code)
    for row in out["horizons"]:  # e.g. the horizon order left out because it contradicts the matrix
        row["bracket_note"] = "; ".join(x for x in (row["bracket_note"], *brackets.notes) if x)
    return out


def _horizon_rows(horizons: list[Horizon], units: list[Unit], ages: list[AgeDetermination],
                  hb: dict[uuid.UUID, HorizonBracket], code: dict[uuid.UUID, str]) -> list[dict[str, Any]]:
    rows = []
    dated = {a.unit_id for a in ages}
    for h in sorted(horizons, key=lambda h: (h.order, h.code)):
        mine = sorted((u for u in units if u.horizon_id == h.id), key=lambda u: u.code)
        b = hb.get(h.id)
        note = b.reason if b else ""
        if b and not note and (b.youngest is None or b.oldest is None):
            side = "youngest" if b.youngest is None else "oldest"
            note = f"no dated unit bounds the {side} side (nothing dated {'above' if side == 'youngest' else 'below'} it)"
        rows.append({
            "id": str(h.id), "code": h.code, "label": h.label, "order": h.order, "formation": h.formation,
            "member": h.member, "bed": h.bed, "age_min_ka": h.age_min_ka, "age_max_ka": h.age_max_ka,
            "units": " ".join(u.code for u in mine),
            "youngest_ka": b.youngest if b else None, "oldest_ka": b.oldest if b else None,
            "youngest_from": _dates_text(b.young_from, code, ages) if b else "",
            "oldest_from": _dates_text(b.old_from, code, ages) if b else "",
            "dated_units": " ".join(u.code for u in mine if u.id in dated), "bracket_note": note,
        })
    return rows


def _label(code: str) -> str:
    return code.replace("_", " ").capitalize()


def codebook_rows(described: dict[str, Resource], recorders: Iterable[str],
                  materials: dict[str, tuple[str, ...]]) -> list[dict[str, Any]]:
    """Every code the files hold: checks (the validation catalogue), the export's own codes, each vocabulary's
    terms (from the enum constraints of the described columns, and the materials per category), the recorders."""
    rows = [{"kind": "check", "code": c, "label": _label(c), "severity": sev, "meaning": what}
            for c, (sev, what) in sorted(CATALOGUE.items())]
    rows += [{"kind": "export", "code": c, "label": _label(c), "meaning": what} for c, what in sorted(EXPORT_CODES.items())]
    seen: dict[tuple[str, tuple[str, ...]], str] = {}  # (field, terms) -> the first table.field holding them
    for table, (_title, fields, _pk, _fks) in described.items():
        for name, _t, _d, cons in fields:
            terms = tuple(str(v) for v in cons.get("enum", ()) if v not in ("", None))
            if terms and (name, terms) not in seen:
                seen[(name, terms)] = f"{table}.{name}"
    for (_name, terms), where in sorted(seen.items(), key=lambda kv: kv[1]):
        rows += [{"kind": f"vocabulary:{where}", "code": v, "label": _label(v)} for v in terms]
    for category, terms in sorted(materials.items()):
        rows += [{"kind": f"vocabulary:material:{category}", "code": v, "label": _label(v)} for v in terms]
    rows += [{"kind": "recorder", "code": r, "label": r, "meaning": "recorder's initials"} for r in sorted(set(recorders))]
    return rows


def _md(text: str) -> str:
    """Text for a Markdown table cell: no column breaks, no angle brackets read as HTML."""
    return text.replace("|", "/").replace("<", "\\<").replace(">", "\\>")


def readme(site_name: str, described: dict[str, Resource], codebook: list[dict[str, Any]], files: list[str]) -> str:
    """``README.md`` for the export folder: the files, every table's columns, the codebook (one source: the data
    package's descriptions and the codebook rows)."""
    out = [f"# {site_name}: the analyst's export", "",
           "Written by `baulk export`. Every CSV is described by `datapackage.json` (a Frictionless Data Package: "
           "types, keys, foreign keys, allowed values); this page says the same in words. Codes (units, trenches, "
           "horizons, seasons) are text, never numbers: read them as strings (pandas: `dtype=str`).", "",
           "- Volumes: a unit's excavated volume comes from its spits, else from its top and bottom surfaces over the "
           "trench outline. A cut has no volume of its own (its fill carries it); units whose volumes share space are "
           "named in `volumes.csv`'s `overlaps`.",
           "- Densities: `bags_per_m3` / `bags_per_10l` count finds (bags); `items_per_m3` / `items_per_10l` count "
           "items (pieces in the bags). `per_m3` and `per_10l` are the bag densities under their first names.",
           "- `--strict` leaves out every find an error-severity check names, every find whose unit has such an error "
           "(a matrix cycle, a fill below its cut, a horizon order the matrix contradicts), and every find with an "
           "open conflict on it or its unit; `excluded.csv` gives each one's code, scope and reason, and "
           "`manifest.json` counts them. Without `--strict` those finds are counted and carry the codes in "
           "`issues`, `unit_errors` and `conflicts`.",
           "- Possible human remains never carry a precise location in any file (`location_withheld`); the shots and "
           "fixes that would place them are left out.", "", "## Files", ""]
    titles = {f"{n}.csv": t for n, (t, _f, _p, _k) in described.items()}
    out += [f"- `{name}`: {titles.get(name, '')}".rstrip(": ") for name in files]
    out += ["", "## Tables", ""]
    for name, (title, fields, pk, fks) in described.items():
        out += [f"### {name}.csv", "", title + ".", ""]
        if pk:
            out.append(f"Key: {', '.join(pk)}." + (" Joins: " + "; ".join(
                f"{', '.join(k['fields'])} -> {k['reference']['resource']}.{', '.join(k['reference']['fields'])}"
                for k in fks) + "." if fks else ""))
            out.append("")
        out += ["| column | type | meaning |", "|---|---|---|"]
        for f, t, d, cons in fields:
            allowed = f". Allowed: {', '.join(str(v) for v in cons['enum'] if v not in ('', None))}." \
                if "enum" in cons else ""
            out.append(f"| {f} | {t} | {_md(d.rstrip('.') if allowed else d)}{allowed} |")
        out.append("")
    out += ["## Codebook", "", "| kind | code | label | severity | meaning |", "|---|---|---|---|---|"]
    out += [f"| {_md(r['kind'])} | {r['code']} | {r.get('label') or ''} | {r.get('severity') or ''} | "
            f"{_md(r.get('meaning') or '')} |" for r in codebook]
    return "\n".join(out) + "\n"
