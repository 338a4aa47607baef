"""The ages files: horizon, unit and find ages from the age model, the stratigraphic ranges of the finds, a proxy
series over the horizons, and their pictures. ``baulk ages`` writes them alone; ``baulk export`` writes them with
the rest (``RESOURCES`` there holds ``AGE_RESOURCES``).

- ``ages_by_horizon.csv``, ``ages_by_unit.csv``, ``ages_by_find.csv``: medians and 68 / 95 % intervals (ka)
  from ``schema.strata.agemodel``; ``ranges.csv``: first and last horizon of each taxon, artifact material and
  category with 95 % confidence extensions (``schema.strata.ranges``); ``series_by_horizon.csv`` when a series
  is given;
- ``ranges.png``: kinds of find against age, the observed range and its extensions drawn apart;
  ``age_depth_<trench>.png``: each trench's age against elevation (median, 68 and 95 % bands, the dates).

The model is seeded (``agemodel.SEED``): the same store gives the same bytes.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from schema.errors import InputFileInvalid
from schema.records import Find, Horizon, Site
from schema.strata import agemodel
from schema.strata.agemodel import AgeModel, AgeSummary, HorizonAge, SeriesSummary, UnitAge
from schema.strata.data import SiteData
from schema.strata.dating import date_words
from schema.strata.matrix import Matrix
from schema.strata.ranges import Range, stratigraphic_ranges

__all__ = ["AGE_RESOURCES", "SERIES_RESOURCES", "AgeTables", "compute_ages", "draw_age_pictures", "horizon_lines",
           "page_ages", "read_series", "write_age_files", "write_age_package"]

_ID = {"required": True}
_KA = {"minimum": 0}
Field = tuple[str, str, str, dict[str, Any]]


def _interval(what: str) -> list[Field]:
    return [
        ("median_ka", "number", f"median age of the {what} (ka)", {}),
        ("lo68_ka", "number", f"68.3 % interval, young end (ka): 15.9 % of the draws of the {what} are younger", {}),
        ("hi68_ka", "number", "68.3 % interval, old end (ka)", {}),
        ("lo95_ka", "number", "95 % interval, young end (ka)", {}),
        ("hi95_ka", "number", "95 % interval, old end (ka)", {}),
    ]


_DRAWS: Field = ("draws", "integer", "draws of the age model kept (every draw respects the order)", {"minimum": 0})
# name -> (description, fields, primary key, foreign keys), as sync_server.exports.RESOURCES
AGE_RESOURCES: dict[str, tuple[str, list[Field], list[str], list[dict[str, Any]]]] = {
    "ages_by_horizon": ("Modelled age of each horizon (order-constrained Monte Carlo over the laboratory dates)", [
        ("horizon", "string", "horizon code", _ID), ("label", "string", "horizon label", {}),
        ("order", "integer", "position from the top, 1 = uppermost", {"minimum": 1}),
        ("units", "string", "its units, space-separated", {}),
        ("age_from", "string", "how its units' ages were found: dated, interpolated or extrapolated by depth, or "
         "horizon", {}),
        *_interval("middle of the horizon (halfway between its top and base, draw by draw)"),
        ("youngest_median_ka", "number", "median age of its top (the youngest of its units' tops), ka", {}),
        ("youngest_lo95_ka", "number", "young end of the 95 % interval of its top, ka", {}),
        ("oldest_median_ka", "number", "median age of its base (the oldest of its units' bases), ka", {}),
        ("oldest_hi95_ka", "number", "old end of the 95 % interval of its base, ka", {}),
        ("depth_m", "number", "mean depth of its units' middles below the top of their trench (m)", {"minimum": 0}),
        ("rests_on", "string", "the dated units (and their dates) its ages are computed from", {}),
        _DRAWS, ("note", "string", "units without an age and why; empty when none", {}),
    ], ["horizon"], []),
    "ages_by_unit": ("Modelled age of each unit: dated, or by depth between dated units of its trench", [
        ("unit", "string", "unit code", _ID), ("trench", "string", "trench code", {}),
        ("horizon", "string", "horizon code; empty when the unit has none", {}),
        ("age_from", "string", "dated, interpolated or extrapolated (by depth in its trench), horizon (no date in its "
         "trench or no depth: its horizon's mean age); empty: no age",
         {"enum": ["dated", "interpolated", "extrapolated", "horizon", ""]}),
        ("top_z", "number", "its top surface at the trench centre, elevation (m)", {}),
        ("bottom_z", "number", "its bottom surface at the trench centre, elevation (m)", {}),
        *_interval("unit's middle"),
        ("top_median_ka", "number", "median age of its top surface (ka)", {}),
        ("bottom_median_ka", "number", "median age of its bottom surface (ka)", {}),
        ("dates", "string", "its own laboratory dates used (lab codes; a date without one by its method and age), "
                  "separated by ' | '", {}),
        ("dates_left_out", "string", "its own laboratory dates left out, each with the reason", {}),
        ("rests_on", "string", "the dated units (and their dates) its ages are computed from", {}),
        _DRAWS, ("note", "string", "why it has no age, or a warning about its age", {}),
    ], ["unit"], []),
    "ages_by_find": ("Age of each find counted, from its Z between its unit's surfaces", [
        ("id", "string", "find id (UUID)", _ID),
        ("number", "integer", "site find number", {"required": True, "minimum": 1}),
        ("unit", "string", "unit code", {}), ("horizon", "string", "horizon code; empty when the unit has none", {}),
        ("position_in_unit", "number", "0 at its unit's top surface, 1 at its base, at the find's E/N",
         {"minimum": 0, "maximum": 1}),
        ("age_from", "string", "Z in its unit, spit middle (sieved), unit middle (no Z), or why there is no age", {}),
        *_interval("find"),
        ("location_withheld", "boolean", "possible human remains: no age from its Z (see its unit's age)", _ID),
    ], ["id"], []),
    "ranges": ("First and last horizon of each kind of find, with 95 % confidence extensions of the range's ends "
               "(Strauss and Sadler 1989; Marshall 1990)", [
        ("kind", "string", "taxon, material (artifacts) or category",
         {"required": True, "enum": ["taxon", "material", "category"]}),
        ("name", "string", "the taxon, material or category", _ID),
        ("finds", "integer", "finds of it counted", {"required": True, "minimum": 1}),
        ("horizons", "integer", "H: horizons it occurs in", {"required": True, "minimum": 0}),
        ("first_horizon", "string", "lowest (oldest) horizon it occurs in: its first appearance", {}),
        ("last_horizon", "string", "highest (youngest) horizon it occurs in: its last appearance", {}),
        ("range_steps", "integer", "observed range in horizon steps (first to last)", {"minimum": 0}),
        ("range_m", "number", "observed range in depth (m), between the horizons' mean depths", {"minimum": 0}),
        ("first_age_ka", "number", "age of the first horizon's middle (median, ka)", {}),
        ("last_age_ka", "number", "age of the last horizon's middle (median, ka)", {}),
        ("range_ka", "number", "observed range in ka (median over the draws)", {}),
        ("confidence", "number", "confidence of the extensions", {"minimum": 0, "maximum": 1}),
        ("alpha_one_end", "number", "one end alone: extension as a fraction of the range, (1-C)^(-1/(H-1)) - 1",
         {"minimum": 0}),
        ("alpha_both_ends", "number", "both ends together: extension of each end as a fraction of the range",
         {"minimum": 0}),
        ("extension_steps", "number", "one end's extension in horizon steps", {"minimum": 0}),
        ("extension_m", "number", "one end's extension in depth (m)", {"minimum": 0}),
        ("extension_ka", "number", "one end's extension in ka (median over the draws)", {}),
        ("first_bound_ka", "number", "older limit of the first appearance at that confidence (ka, median)", {}),
        ("last_bound_ka", "number", "younger limit of the last appearance at that confidence (ka, median)", {}),
        ("note", "string", "why an interval or an age is missing", {}),
    ], ["kind", "name"], []),
}
SERIES_RESOURCES: dict[str, tuple[str, list[Field], list[str], list[dict[str, Any]]]] = {
    "series_by_horizon": ("A series (age_ka, value) summarised over each horizon's age span, draw by draw", [
        ("horizon", "string", "horizon code", _ID),
        ("draws_with_points", "integer", "draws in which the horizon's span holds at least one point", {"minimum": 0}),
        ("points_median", "number", "points in the span (median over the draws)", {"minimum": 0}),
        ("mean_median", "number", "mean value in the span (median over the draws)", {}),
        ("mean_lo95", "number", "2.5 % of the draws' means", {}),
        ("mean_hi95", "number", "97.5 % of the draws' means", {}),
        ("sd_median", "number", "standard deviation (n - 1) in the span (median over the draws)", {"minimum": 0}),
        ("min_median", "number", "smallest value in the span (median over the draws)", {}),
        ("max_median", "number", "largest value in the span (median over the draws)", {}),
    ], ["horizon"], []),
}


@dataclass
class AgeTables:
    """The model and the rows of every ages table (the CSV columns as keys)."""

    model: AgeModel
    horizons: list[HorizonAge]
    rows: dict[str, list[dict[str, Any]]]
    ranges: list[Range]
    horizon_mid: dict[uuid.UUID, np.ndarray]  # horizon id -> draws of its middle age
    occupied: dict[tuple[str, str], set[uuid.UUID]]  # (kind, name) -> the horizons it occurs in


def _r(v: float | None, digits: int = 3) -> float | None:
    return None if v is None or not math.isfinite(v) else round(float(v), digits)


def _ages(s: AgeSummary | None) -> dict[str, float | None]:
    names = ("median_ka", "lo68_ka", "hi68_ka", "lo95_ka", "hi95_ka")
    return {k: _r(getattr(s, k)) if s else None for k in names}


def read_series(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """An analyst's series ``age_ka,value`` (any proxy record), checked whole."""
    from schema.tabular import read_csv

    rows = read_csv(path, required=("age_ka", "value"), numeric=("age_ka", "value"))
    if not rows:
        raise InputFileInvalid(f"{path}: the series has no rows; give one line per point under the header age_ka,value")
    ages = np.asarray([r["age_ka"] for r in rows], dtype=float)
    if (ages < 0).any():
        line = int(np.flatnonzero(ages < 0)[0]) + 2
        raise InputFileInvalid(f"{path}: line {line}, column age_ka: {ages[line - 2]:g} is a negative age; ages are "
                               "in ka before present, 0 or more")
    return ages, np.asarray([r["value"] for r in rows], dtype=float)


def compute_ages(data: SiteData, finds: Sequence[Find], *, matrix: Matrix | None = None,
                 series: tuple[np.ndarray, np.ndarray] | None = None, draws: int = agemodel.DRAWS,
                 seed: int = agemodel.SEED) -> AgeTables:
    """Every ages table for the site's records and the finds given (those counted)."""
    model = agemodel.fit_age_model(data, matrix=matrix, draws=draws, seed=seed)
    horizons = agemodel.horizon_ages(model, data.horizons)
    spans = agemodel.horizon_draws(model, data.horizons)
    mid = {h: (young + old) / 2 for h, (young, old) in spans.items()}
    depth = agemodel.horizon_depths(model, data.horizons)
    code = {h.id: h.code for h in data.horizons}
    horizon_of = {u.id: u.horizon_id for u in data.units}
    rows: dict[str, list[dict[str, Any]]] = {
        "ages_by_horizon": [{
            "horizon": h.code, "label": h.label, "order": h.order, "units": h.units, "age_from": h.how, **_ages(h.age),
            "youngest_median_ka": _r(h.youngest.median_ka) if h.youngest else None,
            "youngest_lo95_ka": _r(h.youngest.lo95_ka) if h.youngest else None,
            "oldest_median_ka": _r(h.oldest.median_ka) if h.oldest else None,
            "oldest_hi95_ka": _r(h.oldest.hi95_ka) if h.oldest else None,
            "depth_m": _r(depth.get(h.horizon_id)), "rests_on": h.rests_on, "draws": model.draws if h.age else 0,
            "note": h.note} for h in horizons],
        "ages_by_unit": _unit_rows(model, agemodel.unit_ages(model), data, code),
        "ages_by_find": _find_rows(model, data, finds, code, horizon_of),
    }
    occurrences = []
    for f in finds:
        h = horizon_of.get(f.unit_id)
        occurrences.append(("category", f.category, h))
        if f.category == "artifact":
            occurrences.append(("material", f.material, h))
        if f.taxon:
            occurrences.append(("taxon", f.taxon, h))
    ranges = stratigraphic_ranges(occurrences, data.horizons, depth_m=depth, age_draws=mid)
    rows["ranges"] = [{k: _r(v, 6) if isinstance(v, float) else v for k, v in dataclasses.asdict(r).items()}
                      for r in ranges]
    if series is not None:
        rows["series_by_horizon"] = _series_rows(agemodel.series_by_horizon(spans, *series), data.horizons)
    occupied: dict[tuple[str, str], set[uuid.UUID]] = {}
    for kind, name, h in occurrences:
        if h is not None:
            occupied.setdefault((kind, name), set()).add(h)
    return AgeTables(model, horizons, rows, ranges, mid, occupied)


def _unit_rows(model: AgeModel, ages: list[UnitAge], data: SiteData,
               code: dict[uuid.UUID, str]) -> list[dict[str, Any]]:
    trench = {t.id: t.code for t in data.trenches}
    unit = {u.id: u for u in data.units}
    left = {x.date_id: x for x in model.left_out}
    out = []
    for a in ages:
        u = unit[a.unit_id]
        mine = [d for d in sorted(data.ages, key=lambda d: d.lab_code or str(d.id)) if d.unit_id == u.id]
        out.append({
            "unit": a.code, "trench": trench.get(u.trench_id),
            "horizon": code.get(u.horizon_id) if u.horizon_id else None,
            "age_from": a.how, "top_z": _r(a.top_z), "bottom_z": _r(a.bottom_z), **_ages(a.age),
            "top_median_ka": _r(a.top_median_ka), "bottom_median_ka": _r(a.bottom_median_ka),
            "dates": " | ".join(date_words(d) for d in mine if d.id not in left),
            "dates_left_out": " | ".join(f"{left[d.id].lab_code}: {left[d.id].reason}" for d in mine if d.id in left),
            "rests_on": a.rests_on, "draws": model.draws if a.age else 0, "note": a.note,
        })
    return out


def _find_rows(model: AgeModel, data: SiteData, finds: Sequence[Find], code: dict[uuid.UUID, str],
               horizon_of: dict[uuid.UUID, uuid.UUID | None]) -> list[dict[str, Any]]:
    spit_mid = {s.id: (s.top_z + s.bottom_z) / 2 for s in data.spits}
    unit_code = {u.id: u.code for u in data.units}
    shown = [f for f in finds if not f.human_remains]
    nan = float("nan")
    fa = agemodel.find_ages(
        model, [f.unit_id for f in shown], [nan if f.e is None else f.e for f in shown],
        [nan if f.n is None else f.n for f in shown], [nan if f.z is None else f.z for f in shown],
        spit_mid_z=[spit_mid.get(f.spit_id, nan) if f.spit_id else nan for f in shown])
    at = {f.id: i for i, f in enumerate(shown)}
    out = []
    for f in sorted(finds, key=lambda f: f.number):
        h = horizon_of.get(f.unit_id)
        row = {"id": str(f.id), "number": f.number, "unit": unit_code.get(f.unit_id, str(f.unit_id)),
               "horizon": code.get(h) if h else None, "location_withheld": f.human_remains}
        if f.id in at:
            i = at[f.id]
            q = fa.quantiles[:, i]
            row.update(position_in_unit=_r(fa.fraction[i], 4), age_from=fa.how[i],
                       **dict(zip(("lo95_ka", "lo68_ka", "median_ka", "hi68_ka", "hi95_ka"), (_r(v) for v in q))))
        else:
            row["age_from"] = "withheld (possible human remains): see its unit's age"
        out.append(row)
    return out


def _series_rows(summaries: list[SeriesSummary], horizons: list[Horizon]) -> list[dict[str, Any]]:
    by = {s.horizon_id: s for s in summaries}
    out = []
    for h in sorted(horizons, key=lambda h: h.order):
        s = by.get(h.id)
        out.append({"horizon": h.code, "draws_with_points": s.draws_with_points if s else 0,
                    **({} if s is None else {
                        "points_median": _r(s.points), "mean_median": _r(s.mean, 6), "mean_lo95": _r(s.mean_lo95, 6),
                        "mean_hi95": _r(s.mean_hi95, 6), "sd_median": _r(s.sd, 6), "min_median": _r(s.min, 6),
                        "max_median": _r(s.max, 6)})})
    return out


# -- files ------------------------------------------------------------------------------------------------------
def _resources() -> dict[str, tuple[str, list[Field], list[str], list[dict[str, Any]]]]:
    return {**AGE_RESOURCES, **SERIES_RESOURCES}


def write_age_files(tables: AgeTables, out: Path) -> dict[str, int]:
    """Each table of ``tables`` as ``<name>.csv`` in ``out``; rows written per table."""
    from .exports import _cell

    written = {}
    for name, rows in tables.rows.items():
        fields = [f[0] for f in _resources()[name][1]]
        with (out / f"{name}.csv").open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(fields)
            for r in rows:
                w.writerow([_cell(r.get(k)) for k in fields])
        written[name] = len(rows)
    return written


def write_age_package(site: Site, names: Sequence[str], out: Path) -> Path:
    """``datapackage.json`` describing the ages tables written into ``out`` (for ``baulk ages --out``)."""
    from .exports import _datapackage

    package = _datapackage(site, {n: _resources()[n] for n in names})
    package["name"] += "-ages"
    package["title"] = f"{site.name}: ages and stratigraphic ranges"
    path = out / "datapackage.json"
    path.write_text(json.dumps(package, indent=2))
    return path


def page_ages(data: SiteData) -> dict[str, Any]:
    """The horizon ages for the camp's Horizons page: the same model, seed and draws as the tables."""
    model = agemodel.fit_age_model(data)
    rows = [{"code": h.code, "label": h.label, "how": h.how, "age": h.age, "youngest": h.youngest, "oldest": h.oldest,
             "rests_on": h.rests_on, "note": h.note} for h in agemodel.horizon_ages(model, data.horizons)]
    return {"rows": rows, "draws": model.draws, "problem": model.problem, "notes": model.notes,
            "left_out": model.left_out}


def horizon_lines(tables: AgeTables) -> list[str]:
    """The horizon ages in words, one line each (the command and the camp page)."""
    out = []
    for h in tables.horizons:
        if h.age is None:
            out.append(f"{h.code} {h.label}: no age ({h.note or 'no unit with an age'})")
            continue
        out.append(f"{h.code} {h.label}: {h.age.median_ka:.1f} ka (95 %: {h.age.lo95_ka:.1f}-{h.age.hi95_ka:.1f}; "
                   f"68 %: {h.age.lo68_ka:.1f}-{h.age.hi68_ka:.1f}), {h.how}"
                   + (f"; {h.note}" if h.note else ""))
    return out


# -- pictures ---------------------------------------------------------------------------------------------------
def draw_age_pictures(tables: AgeTables, data: SiteData, out: Path) -> list[Path]:
    """``ranges.png`` and one ``age_depth_<trench>.png`` per trench with ages; the files written."""
    import matplotlib

    matplotlib.use("Agg")
    files = [_draw_ranges(tables, data, out)] if tables.ranges else []
    for t in data.trenches:
        path = _draw_age_depth(tables.model, t, data, out)
        if path is not None:
            files.append(path)
    return files


_KIND_ORDER = {"category": 0, "material": 1, "taxon": 2}


def _draw_ranges(tables: AgeTables, data: SiteData, out: Path) -> Path:
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    from .export_pictures import PALETTE

    horizons = sorted(data.horizons, key=lambda h: h.order)
    aged = {h.horizon_id: h.age.median_ka for h in tables.horizons if h.age}
    use_ka = bool(aged) and all(h.id in aged for h in horizons)
    pos = ({h.id: aged[h.id] for h in horizons} if use_ka else {h.id: float(i + 1) for i, h in enumerate(horizons)})
    by_code = {h.code: h.id for h in horizons}
    ranges = sorted((r for r in tables.ranges if r.horizons), key=lambda r: (_KIND_ORDER[r.kind], r.name))
    fig, ax = plt.subplots(figsize=(max(7.0, 0.42 * len(ranges) + 3), 6))
    colour = {"category": PALETTE[4], "material": PALETTE[5], "taxon": PALETTE[2]}
    for x, r in enumerate(ranges):
        first, last = pos[by_code[r.first_horizon]], pos[by_code[r.last_horizon]]
        ax.plot([x, x], [last, first], color=colour[r.kind], linewidth=6, solid_capstyle="butt", zorder=2)
        if r.alpha_one_end is not None:
            ext = (r.extension_ka if use_ka else r.extension_steps) or 0.0
            for a, b in ((first, first + ext), (last, last - ext)):
                ax.plot([x, x], [a, b], color="#222222", linewidth=1.2, linestyle=(0, (3, 2)), zorder=1)
                ax.plot([x - 0.18, x + 0.18], [b, b], color="#222222", linewidth=1.2, zorder=1)
    for x, r in enumerate(ranges):
        ys = sorted(pos[h] for h in tables.occupied.get((r.kind, r.name), ()) if h in pos)
        ax.scatter([x] * len(ys), ys, s=16, color="white", edgecolors="#222222", linewidths=0.8, zorder=3)
    for h in horizons:
        ax.axhline(pos[h.id], color="#BBBBBB", linewidth=0.6, zorder=0)
    ax.set_xticks(range(len(ranges)))
    ax.set_xticklabels([f"{r.name} ({r.kind})" for r in ranges], rotation=60, ha="right", fontsize=9)
    ax.set_xlim(-0.7, len(ranges) - 0.3)
    ax.invert_yaxis()  # older downward, as in a section
    ax.set_ylabel("Age (ka), older downward" if use_ka else "Horizon order from the top (1 = uppermost)")
    ax.set_xlabel("Kind of find")
    right = ax.secondary_yaxis("right")
    right.set_yticks([pos[h.id] for h in horizons], labels=[h.code for h in horizons])
    right.set_ylabel("Horizon (at its median age)" if use_ka else "Horizon")
    ax.set_title("Stratigraphic ranges of the finds, with 95 % confidence extensions of each end", fontsize=11)
    handles = [Line2D([], [], color=colour[k], linewidth=6, label=f"observed range: {k}") for k in colour
               if any(r.kind == k for r in ranges)]
    handles += [Line2D([], [], marker="o", linestyle="none", markerfacecolor="white", markeredgecolor="#222222",
                       label="horizon with finds"),
                Line2D([], [], color="#222222", linewidth=1.2, linestyle=(0, (3, 2)),
                       label="95 % extension of one end\n(Strauss and Sadler 1989;\nnone on fewer than 3 horizons)")]
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.12, 1.0), fontsize=9, frameon=False)
    path = out / "ranges.png"
    fig.savefig(path, dpi=150, bbox_inches="tight")
    plt.close(fig)
    return path


def _draw_age_depth(model: AgeModel, trench: Any, data: SiteData, out: Path) -> Path | None:
    import matplotlib.pyplot as plt
    from matplotlib.patches import Patch

    from .export_pictures import _colours

    rules = sorted((r for r in model.rules.values() if r.trench_id == trench.id and r.mid is not None),
                   key=lambda r: -(r.top_z or 0))
    with_depth = [r for r in rules if r.top_z is not None and r.bottom_z is not None]
    if not with_depth:
        return None
    top = max(r.top_z for r in with_depth)  # type: ignore[type-var]
    bottom = min(r.bottom_z for r in with_depth)  # type: ignore[type-var]
    z = np.linspace(bottom, top, 121)
    q = agemodel.age_depth_curve(model, trench.id, z)
    colour = _colours(data.horizons)
    hcode = {h.id: h.code for h in data.horizons}
    fig, ax = plt.subplots(figsize=(7.5, 5.5))
    ax.fill_betweenx(z, q[0], q[4], color="#9ECAE1", label="95 % interval", zorder=1)
    ax.fill_betweenx(z, q[1], q[3], color="#4292C6", label="68.3 % interval", zorder=2)
    ax.plot(q[2], z, color="#08306B", linewidth=1.5, label="median age", zorder=3)
    labels: dict[float, list[str]] = {}
    for r in with_depth:
        c = colour.get(r.horizon_id, "#DDDDDD") if r.horizon_id else "#DDDDDD"
        ax.axhspan(r.bottom_z, r.top_z, xmin=0.0, xmax=0.025, color=c, zorder=4)  # type: ignore[arg-type]
        ax.axhline(r.bottom_z, color="#999999", linewidth=0.5, linestyle=":", zorder=0)  # type: ignore[arg-type]
        labels.setdefault(round((r.top_z + r.bottom_z) / 2, 3), []).append(  # type: ignore[operator]
            f"{r.code} ({hcode.get(r.horizon_id, '-') if r.horizon_id else '-'})")
    for mid, names in labels.items():  # units at the same depth (a cut and its fill) share one label
        ax.text(1.01, mid, ", ".join(names), transform=ax.get_yaxis_transform(), va="center", fontsize=8)
    first = True
    for r in with_depth:
        if r.anchor is None:
            continue
        a = model.anchors[r.anchor]
        mid = (r.top_z + r.bottom_z) / 2  # type: ignore[operator]
        ax.errorbar([a.age_ka], [mid], xerr=[[2 * a.sigma_ka], [2 * a.sigma_ka]], fmt="s", color="#D55E00",
                    markersize=6, capsize=4, zorder=5, label="laboratory date +- 2 sigma, at the\nmiddle of its unit" if first else None)
        first = False
    ax.set_xlabel("Age (ka)")
    ax.set_ylabel("Elevation Z (m, site datum)")
    ax.set_title(f"Trench {trench.code}: age against depth (order-constrained model, {model.draws} draws)", fontsize=11)
    ax.grid(True, linewidth=0.3)
    handles, _labels = ax.get_legend_handles_labels()
    shown = {r.horizon_id for r in with_depth if r.horizon_id}
    handles += [Patch(color=colour[h.id], label=f"{h.code} {h.label} (strip at left)")
                for h in sorted(data.horizons, key=lambda h: h.order) if h.id in shown]
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=2, fontsize=9, frameon=False)
    ax.text(1.01, 1.01, "unit (horizon)", transform=ax.transAxes, fontsize=8, va="bottom")
    path = out / f"age_depth_{trench.code}.png"
    fig.savefig(path, dpi=150, bbox_inches="tight")
    plt.close(fig)
    return path
