"""The validation rules: pure functions over a site's data that return issues (never raise, never block).

Finds are checked column-wise with numpy; an ``Issue`` is built only for a find that fails. Tolerances: the
site's ``z_tolerance_m`` (2 cm by default, common practice, no source) for Z against unit surfaces; 5 cm outside
an outline before a plotted find counts as outside its trench, and 10 m from every trench as far outside
(common practice, no source); 1 cm for instrument-setup residuals (common practice, no source).
"""

from __future__ import annotations

import datetime as dt
import uuid
import zoneinfo
from collections import Counter, defaultdict
from typing import Any

import numpy as np

from .data import SiteData
from .geometry import Surface, distance_to_ring, points_in_ring
from .issues import Issue, issue
from .matrix import Matrix

__all__ = [
    "EDGE_TOLERANCE_M", "FAR_OUTSIDE_M", "SETUP_TOLERANCE_M", "find_issues", "horizon_issues", "level_issues",
    "quality_issues",
]

EDGE_TOLERANCE_M = 0.05
FAR_OUTSIDE_M = 10.0
SETUP_TOLERANCE_M = 0.01
RTK_FIXED = 4


def _local_dates(epoch_s: np.ndarray, tz_name: str) -> np.ndarray:
    """Calendar date (as a proleptic ordinal) of each UTC instant in the site's time zone."""
    if len(epoch_s) == 0:
        return np.zeros(0, dtype=np.int64)
    tz = zoneinfo.ZoneInfo(tz_name)
    hours = np.floor(epoch_s / 3600.0)
    uniq, inverse = np.unique(hours, return_inverse=True)
    offsets = np.array([
        dt.datetime.fromtimestamp(h * 3600.0, tz).utcoffset().total_seconds()  # type: ignore[union-attr]
        for h in uniq
    ])
    local = epoch_s + offsets[inverse]
    return (np.floor(local / 86400.0).astype(np.int64) + dt.date(1970, 1, 1).toordinal())


def _label(number: int) -> str:
    return f"find {number}"


def find_issues(data: SiteData, matrix: Matrix) -> list[Issue]:
    """Unit assignment, position, sieving and numbering of every find."""
    f = data.finds
    if len(f) == 0:
        return []
    units = data.units
    index = {u.id: i for i, u in enumerate(units)}
    uidx = np.fromiter((index.get(u, -1) for u in f.unit_id), dtype=np.int64, count=len(f))
    live = ~f.voided
    out: list[Issue] = []
    out += _unit_assignment(data, uidx, live)
    out += _positions(data, uidx, live)
    out += _sieving(data, uidx, live)
    out += _numbers(data)
    return out


def _unit_assignment(data: SiteData, uidx: np.ndarray, live: np.ndarray) -> list[Issue]:
    f, units = data.finds, data.units
    out: list[Issue] = []
    trench_code = {t.id: t.code for t in data.trenches}
    for i in np.flatnonzero(live & (uidx < 0)):
        out.append(issue("UNIT_UNKNOWN", "find", f.id[i], _label(f.number[i]),
                         f"find {f.number[i]} is in unit {f.unit_id[i]}, which is not recorded",
                         "record the unit, or correct the find's unit", value=str(f.unit_id[i])))
    known = live & (uidx >= 0)
    kind = np.array([u.kind for u in units] + [""], dtype=object)[uidx]
    for i in np.flatnonzero(known):
        unit = units[uidx[i]]
        if unit.trench_id != f.trench_id[i]:
            out.append(issue(
                "UNIT_OTHER_TRENCH", "find", f.id[i], _label(f.number[i]),
                f"find {f.number[i]} is recorded in trench {trench_code.get(f.trench_id[i], '?')} but unit "
                f"{unit.code} belongs to trench {trench_code.get(unit.trench_id, '?')}",
                "check the find's unit or its trench", value=unit.code,
            ))
    for i in np.flatnonzero(known & (kind == "cut")):
        unit = units[uidx[i]]
        out.append(issue("UNIT_IS_CUT", "find", f.id[i], _label(f.number[i]),
                         f"find {f.number[i]} is recorded in unit {unit.code}, which is a cut (cuts hold no finds)",
                         f"record it in the fill of {unit.code}", value=unit.code))
    opened = np.array([u.opened_on.toordinal() for u in units] + [0])[uidx]
    closed = np.array([u.closed_on.toordinal() if u.closed_on else 10**7 for u in units] + [10**7])[uidx]
    day = _local_dates(f.found_epoch_s, data.site.timezone)
    for i in np.flatnonzero(known & ((day < opened) | (day > closed))):
        unit = units[uidx[i]]
        when = dt.date.fromordinal(int(day[i]))
        span = f"open {unit.opened_on}" + (f" to {unit.closed_on}" if unit.closed_on else " onwards")
        out.append(issue("UNIT_NOT_OPEN", "find", f.id[i], _label(f.number[i]),
                         f"find {f.number[i]} is dated {when} but unit {unit.code} was {span}",
                         "check the find's date or unit, or the unit's open and close dates", value=str(when)))
    return out


def _positions(data: SiteData, uidx: np.ndarray, live: np.ndarray) -> list[Issue]:
    f = data.finds
    plotted = live & ~np.isnan(f.e) & (f.position_source != "none")
    out: list[Issue] = []
    trenches = {t.id: t for t in data.trenches}
    tid = np.array([t for t in f.trench_id], dtype=object)
    for t in data.trenches:
        sel = np.flatnonzero(plotted & (tid == t.id))
        if len(sel) == 0:
            continue
        inside = points_in_ring(f.e[sel], f.n[sel], t.outline)
        outside = sel[~inside]
        if len(outside) == 0:
            continue
        d_own = distance_to_ring(f.e[outside], f.n[outside], t.outline)
        d_any = np.min([np.where(points_in_ring(f.e[outside], f.n[outside], o.outline), 0.0,
                                 distance_to_ring(f.e[outside], f.n[outside], o.outline)) for o in trenches.values()], axis=0)
        for i, d, da in zip(outside, d_own, d_any):
            if da > FAR_OUTSIDE_M:
                out.append(issue("POS_FAR_OUTSIDE", "find", f.id[i], _label(f.number[i]),
                                 f"find {f.number[i]} at E {f.e[i]:.3f} N {f.n[i]:.3f} is {da:.1f} m from the nearest trench",
                                 "check the instrument setup, the target height and the find's coordinates",
                                 value=round(float(da), 3)))
            elif d > EDGE_TOLERANCE_M:
                out.append(issue("POS_OUTSIDE_TRENCH", "find", f.id[i], _label(f.number[i]),
                                 f"find {f.number[i]} at E {f.e[i]:.3f} N {f.n[i]:.3f} is {d:.3f} m outside trench {t.code}",
                                 "check the coordinates, or whether it belongs to another trench", value=round(float(d), 3)))
    out += _depths(data, uidx, plotted)
    return out


def _surfaces(data: SiteData) -> dict[tuple[uuid.UUID, str], Surface]:
    pts: dict[tuple[uuid.UUID, str], list[tuple[float, float, float]]] = defaultdict(list)
    for lp in data.level_points:
        pts[(lp.unit_id, lp.surface)].append((lp.e, lp.n, lp.z))
    return {k: Surface.from_points(v) for k, v in pts.items()}


def _depths(data: SiteData, uidx: np.ndarray, plotted: np.ndarray) -> list[Issue]:
    f, units, tol = data.finds, data.units, data.site.z_tolerance_m
    surfaces = _surfaces(data)
    out: list[Issue] = []
    order = np.argsort(uidx, kind="stable")
    bounds = np.searchsorted(uidx[order], np.arange(len(units) + 1))
    for ui, unit in enumerate(units):
        sel = order[bounds[ui]:bounds[ui + 1]]
        sel = sel[plotted[sel]]
        if len(sel) == 0 or unit.kind == "cut":
            continue
        for surface, word in (("top", "top"), ("bottom", "base")):
            surf = surfaces.get((unit.id, surface))
            if surf is None:
                out.append(issue("SURFACE_MISSING", "unit", unit.id, f"unit {unit.code}",
                                 f"unit {unit.code} has {len(sel)} plotted finds but no level points on its {surface}",
                                 f"shoot level points on the {surface} of {unit.code}; Z checks against it are skipped",
                                 value=len(sel), detail=surface))
                continue
            zs, method = surf.z_at(f.e[sel], f.n[sel])
            diff = f.z[sel] - zs
            bad = diff > tol if surface == "top" else diff < -tol
            code = "POS_ABOVE_UNIT" if surface == "top" else "POS_BELOW_UNIT"
            for i, dz, m in zip(sel[bad], diff[bad], method[bad]):
                where = "above the top" if surface == "top" else "below the base"
                note = "" if m == "triangulation" else f" (surface extended by its {m} beyond its level points)"
                out.append(issue(code, "find", f.id[i], _label(f.number[i]),
                                 f"find {f.number[i]}: Z {f.z[i]:.3f} is {abs(dz):.3f} m {where} of unit {unit.code} "
                                 f"at this point{note}", "check the unit or the target height", value=round(float(dz), 4)))
            extrapolated = int((method != "triangulation").sum())
            if extrapolated:
                out.append(issue("SURFACE_EXTRAPOLATED", "unit", unit.id, f"unit {unit.code}",
                                 f"{extrapolated} finds of unit {unit.code} lie outside the level points of its {surface}",
                                 f"shoot level points around the edges of {unit.code}", value=extrapolated, detail=surface))
    return out


def _sieving(data: SiteData, uidx: np.ndarray, live: np.ndarray) -> list[Issue]:
    f = data.finds
    spit_unit = {s.id: s.unit_id for s in data.spits}
    codes = {u.id: u.code for u in data.units}
    out: list[Issue] = []
    sieved = np.flatnonzero(live & (f.recovery == "sieved"))
    for i in sieved:
        spit = f.spit_id[i]
        if spit is None:
            out.append(issue("SIEVE_NO_SPIT", "find", f.id[i], _label(f.number[i]),
                             f"sieved find {f.number[i]} names no spit", "give the spit (and bucket) it was sieved from"))
        elif spit in spit_unit and spit_unit[spit] != f.unit_id[i]:
            out.append(issue("SPIT_OTHER_UNIT", "find", f.id[i], _label(f.number[i]),
                             f"find {f.number[i]} is in unit {codes.get(f.unit_id[i], '?')} but its spit belongs to "
                             f"unit {codes.get(spit_unit[spit], '?')}", "correct the unit or the spit"))
        if f.position_source[i] != "none":
            out.append(issue("SIEVE_HAS_POINT", "find", f.id[i], _label(f.number[i]),
                             f"sieved find {f.number[i]} carries an exact point ({f.position_source[i]})",
                             "a sieve find has only its spit and bucket: clear the point, or set recovery to plotted"))
    return out


def _numbers(data: SiteData) -> list[Issue]:
    f = data.finds
    uniq, counts = np.unique(f.number, return_counts=True)
    out = []
    codes = {u.id: u.code for u in data.units}
    zone = _zone(data)
    for number in uniq[counts > 1]:
        rows = list(np.flatnonzero(f.number == number))
        ids = [f.id[i] for i in rows]
        seen = "; ".join(_find_words(f, i, codes, zone) for i in rows)
        for other in ids[1:]:
            out.append(issue("NUMBER_DUPLICATE", "find", other, _label(int(number)),
                             f"find number {number} is used by {len(ids)} finds ({seen})",
                             "keep the number on one find and give the others new numbers from their tablets' blocks "
                             "(a voided find keeps its number)", value=int(number), detail=str(ids[0])))
    return out


def _zone(data: SiteData) -> dt.tzinfo:
    try:
        return zoneinfo.ZoneInfo(data.site.timezone)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        return dt.timezone.utc


def _find_words(f: Any, i: int, codes: dict[uuid.UUID, str], zone: dt.tzinfo) -> str:
    """One find as a recorder tells it apart from another of the same number: its unit and when it was found
    (in the site's time zone), and whether it is voided."""
    when = dt.datetime.fromtimestamp(float(f.found_epoch_s[i]), zone).strftime("%Y-%m-%d %H:%M")
    words = f"in unit {codes.get(f.unit_id[i], 'not recorded')}, found {when}"
    return words + (", voided" if f.voided[i] else "")


def horizon_issues(data: SiteData, matrix: Matrix) -> list[Issue]:
    """Horizon order against the matrix; units with finds but no horizon; same-as units split across horizons."""
    out: list[Issue] = []
    horizon = {h.id: h for h in data.horizons}
    units = matrix.units
    hz_of: dict[uuid.UUID, Any] = {u.id: horizon.get(u.horizon_id) for u in units.values() if u.horizon_id}
    for group, members in matrix.members.items():
        orders = {hz_of[u].code for u in members if u in hz_of}
        if len(orders) > 1:
            out.append(issue("HORIZON_SAME_AS_SPLIT", "unit", group, f"units {matrix.label(group)}",
                             f"units {matrix.label(group)} are recorded as the same unit but sit in horizons "
                             f"{', '.join(sorted(orders))}", "put them in one horizon, or correct the same-as record"))
    if matrix.below is not None:
        for upper in units.values():
            hu = hz_of.get(upper.id)
            if hu is None:
                continue
            for g in matrix.below[matrix.group_of[upper.id]]:
                for lower_id in matrix.members[g]:
                    hl = hz_of.get(lower_id)
                    if hl is not None and hu.order > hl.order:
                        lower = units[lower_id]
                        out.append(issue(
                            "HORIZON_ORDER", "unit", upper.id, f"unit {upper.code}",
                            f"unit {upper.code} lies above unit {lower.code} in the matrix, but its horizon {hu.code} "
                            f"(order {hu.order}) is below {lower.code}'s horizon {hl.code} (order {hl.order})",
                            "correct the horizon assignment or the relations", detail=str(lower_id),
                        ))
    counts = Counter(u for u, v in zip(data.finds.unit_id, data.finds.voided) if not v)
    for u in units.values():
        if counts.get(u.id) and u.horizon_id is None and u.kind != "cut":
            out.append(issue("HORIZON_MISSING", "unit", u.id, f"unit {u.code}",
                             f"unit {u.code} has {counts[u.id]} finds but no horizon",
                             "an analyst assigns it to a horizon", value=counts[u.id]))
    return out


def level_issues(data: SiteData) -> list[Issue]:
    known = {u.id for u in data.units}
    return [
        issue("LEVEL_UNKNOWN_UNIT", "level_point", lp.id, f"{lp.surface} level at E {lp.e:.3f} N {lp.n:.3f}",
              f"a {lp.surface} level point at E {lp.e:.3f} N {lp.n:.3f} Z {lp.z:.3f} names a unit that is not "
              "recorded at this site",
              "record the unit (or sync the tablet that recorded it), or correct the level point's unit",
              detail=str(lp.unit_id))
        for lp in data.level_points if lp.unit_id not in known
    ]


def quality_issues(data: SiteData) -> list[Issue]:
    """GNSS fixes below RTK fixed on plotted finds, and instrument setups with large residuals."""
    out: list[Issue] = []
    fixes = {g.id: g for g in data.gnss_fixes}
    f = data.finds
    for i in np.flatnonzero(~f.voided & (f.position_source == "gnss")):
        fix = fixes.get(f.gnss_fix_id[i])  # type: ignore[arg-type]
        if fix is None or fix.fix_quality == RTK_FIXED:
            continue
        why = f"; accepted by the recorder: {fix.plot_override_reason}" if fix.plot_override_reason else ""
        out.append(issue("GNSS_NOT_FIXED", "find", f.id[i], _label(f.number[i]),
                         f"find {f.number[i]} was plotted from a GNSS fix of quality {fix.fix_quality} (not RTK fixed){why}",
                         "re-measure with an RTK fixed solution or the total station if the find is still exposed",
                         value=fix.fix_quality))
    for s in data.setups:
        worst = max((float(r.get("d", r.get("distance_m") or 0.0) or 0.0) for r in s.residuals if isinstance(r, dict)),
                    default=0.0, key=abs)
        if abs(worst) > SETUP_TOLERANCE_M:
            out.append(issue("SETUP_RESIDUAL", "station_setup", s.id, f"setup {s.station_code} {s.set_up_at:%Y-%m-%d}",
                             f"setup {s.station_code} on {s.set_up_at:%Y-%m-%d} has a residual of {abs(worst):.3f} m",
                             "check the control points and re-set the instrument; recompute its shots after",
                             value=round(abs(worst), 4)))
    return out

