"""What analysts count: finds per horizon (and per unit) by category, material and recovery, with the excavated and
sieved volumes they came from, and which finds are left out and why. Plain functions over records and issues.

- Excavated volume of a spit is its area times its thickness (m3); a unit's and a horizon's are the sums over
  their spits. A unit dug without spits but with level points on its top and bottom surfaces gets the volume
  between the two surfaces over its trench's outline instead (midpoint rule on a 5 cm grid; exact for planes).
  Sieved volume is the recorded sieved litres, summed the same way.
- A cut has no volume of its own: it is the shape of a hole, and the fill that fills it carries the earth that
  was dug (common practice, no source). Counting both would count the same earth twice.
- Overlaps: two units of one trench whose volumes share space (their Z intervals overlap over the same ground;
  spits are taken as level across the trench) are named in each other's ``overlaps``: their volumes, and so
  every density over them, count some earth twice until the records are corrected.
- Densities: finds (bags) and items (the sum of the finds' ``count``, pieces in the bags) per m3 of excavated
  volume, and per 10 L of sieved volume for sieved finds only. A volume of zero or none gives no density (an
  empty cell), never an infinity. ``per_m3`` and ``per_10l`` are the bag densities under their old names.
- Plotted, sieved, surface and core finds are counted apart (``recovery``): they were recovered differently.
- Exclusion: a voided find is always left out (code ``VOIDED``). In strict mode a find is left out too when an
  error-severity check names it, when an error-severity check names its unit (a unit caught in a matrix cycle,
  a fill placed before its cut, a horizon order the matrix contradicts: the find's place in the sequence is
  what is in doubt; code ``UNIT_ERROR:<code>``), or when a field of the find or of its unit has an open
  conflict (code ``CONFLICT``), each with the reason. Otherwise such finds are counted and carry their issue
  codes, unit errors and conflicts.
"""

from __future__ import annotations

import uuid
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any, Iterable

from .records import Find, Horizon, LevelPoint, Relation, Spit, Unit
from .strata.issues import Issue

__all__ = ["CountRow", "Excluded", "Selection", "Tally", "Volume", "count_rows", "outline_area_m2", "select_finds",
           "spit_volume_m3",
           "surface_volume_m3", "tally", "unit_errors", "unit_volumes", "volume_overlaps"]


def outline_area_m2(outline: list[tuple[float, float]]) -> float:
    """The area of a closed outline (shoelace formula), m2."""
    pts = list(outline)
    return abs(sum(x0 * y1 - x1 * y0 for (x0, y0), (x1, y1) in zip(pts, pts[1:] + pts[:1]))) / 2


def spit_volume_m3(spit: Spit) -> float:
    """Area (m2) times thickness (m)."""
    return spit.area_m2 * (spit.top_z - spit.bottom_z)


@dataclass(frozen=True)
class Volume:
    excavated_m3: float = 0.0
    sieved_l: float = 0.0
    spits: int = 0
    from_surfaces: int = 0  # units whose volume came from their surfaces (no spits)

    def __add__(self, other: "Volume") -> "Volume":
        return Volume(self.excavated_m3 + other.excavated_m3, self.sieved_l + other.sieved_l, self.spits + other.spits,
                      self.from_surfaces + other.from_surfaces)

    @property
    def known(self) -> bool:
        return bool(self.spits or self.from_surfaces)


def _cells(outline: list[tuple[float, float]], cell_m: float) -> tuple[Any, Any]:
    """Centres of the ``cell_m`` squares of the outline's bounding box that lie inside the outline."""
    import numpy as np

    from .strata.geometry import points_in_ring

    ring = np.asarray(outline, dtype=float)
    (e0, n0), (e1, n1) = ring.min(axis=0), ring.max(axis=0)
    xs = np.arange(e0 + cell_m / 2, e1, cell_m)
    ys = np.arange(n0 + cell_m / 2, n1, cell_m)
    gx, gy = (a.ravel() for a in np.meshgrid(xs, ys))
    inside = points_in_ring(gx, gy, ring)
    return gx[inside], gy[inside]


def _surface_z(points: list[LevelPoint], gx: Any, gy: Any) -> Any:
    from .strata.geometry import Surface

    return Surface.from_points([(p.e, p.n, p.z) for p in points]).z_at(gx, gy)[0]


def surface_volume_m3(top: list[LevelPoint], bottom: list[LevelPoint], outline: list[tuple[float, float]], *,
                      cell_m: float = 0.05) -> float:
    """Volume between a unit's top and bottom surfaces over an outline: the thickness (never below zero) at the
    centre of each ``cell_m`` square inside the outline, times the cell's area."""
    import numpy as np

    gx, gy = _cells(outline, cell_m)
    zt, zb = _surface_z(top, gx, gy), _surface_z(bottom, gx, gy)
    return float(np.clip(np.nan_to_num(zt - zb), 0, None).sum() * cell_m * cell_m)


def unit_volumes(spits: Iterable[Spit], *, units: Iterable[Unit] = (), levels: Iterable[LevelPoint] = (),
                 outlines: dict[uuid.UUID, list[tuple[float, float]]] | None = None) -> dict[uuid.UUID, Volume]:
    """Each unit's volume: from its spits, else (given ``units``, their level points and the trench
    ``outlines`` by trench id) from its top and bottom surfaces. A cut (among ``units``) gets none: its fill
    carries the volume."""
    units = list(units)
    cuts = {u.id for u in units if u.kind == "cut"}
    out: dict[uuid.UUID, Volume] = defaultdict(Volume)
    for s in spits:
        if s.unit_id not in cuts:
            out[s.unit_id] = out[s.unit_id] + Volume(spit_volume_m3(s), s.sieved_volume_l or 0.0, 1)
    by_surface = _by_surface(levels)
    for u in units:
        top, bottom = by_surface.get((u.id, "top")), by_surface.get((u.id, "bottom"))
        outline = (outlines or {}).get(u.trench_id)
        if u.id in out or u.id in cuts or not top or not bottom or not outline:
            continue
        out[u.id] = Volume(surface_volume_m3(top, bottom, outline), 0.0, 0, 1)
    return dict(out)


def _by_surface(levels: Iterable[LevelPoint]) -> dict[tuple[uuid.UUID, str], list[LevelPoint]]:
    by_surface: dict[tuple[uuid.UUID, str], list[LevelPoint]] = defaultdict(list)
    for p in levels:
        by_surface[(p.unit_id, p.surface)].append(p)
    return by_surface


def volume_overlaps(spits: Iterable[Spit], *, units: Iterable[Unit], levels: Iterable[LevelPoint] = (),
                    outlines: dict[uuid.UUID, list[tuple[float, float]]], cell_m: float = 0.05,
                    tolerance_m3: float = 0.001) -> dict[uuid.UUID, dict[uuid.UUID, float]]:
    """For every unit (cuts aside) whose volume shares space with another unit's of the same trench: the other
    unit and the shared volume (m3), when above ``tolerance_m3``. A unit's space is its spits (each taken as a
    level slab from its bottom to its top Z, over its share of the outline: area / outline area) or the space
    between its top and bottom surfaces, cell by cell over the trench outline (the grid ``surface_volume_m3``
    uses)."""
    import numpy as np

    by_surface = _by_surface(levels)
    spits_of: dict[uuid.UUID, list[Spit]] = defaultdict(list)
    for s in spits:
        spits_of[s.unit_id].append(s)
    by_trench: dict[uuid.UUID, list[Unit]] = defaultdict(list)
    for u in units:
        if u.kind != "cut" and u.trench_id in outlines:
            by_trench[u.trench_id].append(u)
    out: dict[uuid.UUID, dict[uuid.UUID, float]] = defaultdict(dict)
    for trench_id, members in by_trench.items():
        gx, gy = _cells(outlines[trench_id], cell_m)
        if not len(gx):
            continue
        cell_area = cell_m * cell_m
        outline_area = len(gx) * cell_area
        slabs: dict[uuid.UUID, list[tuple[Any, Any, float]]] = {}
        for u in members:
            if spits_of.get(u.id):
                slabs[u.id] = [(np.full(len(gx), s.bottom_z), np.full(len(gx), s.top_z),
                                min(1.0, s.area_m2 / outline_area)) for s in spits_of[u.id]]
            elif by_surface.get((u.id, "top")) and by_surface.get((u.id, "bottom")):
                zt, zb = _surface_z(by_surface[(u.id, "top")], gx, gy), _surface_z(by_surface[(u.id, "bottom")], gx, gy)
                slabs[u.id] = [(np.nan_to_num(zb), np.nan_to_num(zt), 1.0)]
        ids = sorted(slabs, key=lambda i: str(i))
        for i, a in enumerate(ids):
            for b in ids[i + 1:]:
                shared = 0.0
                for ba, ta, wa in slabs[a]:
                    for bb, tb, wb in slabs[b]:
                        depth = np.clip(np.minimum(ta, tb) - np.maximum(ba, bb), 0, None)
                        shared += float(depth.sum()) * cell_area * min(wa, wb)
                if shared > tolerance_m3:
                    out[a][b] = out[b][a] = shared
    return dict(out)


@dataclass(frozen=True)
class Excluded:
    find: Find
    code: str
    message: str
    applies_to: str = "find"  # find (a check on the find), unit (a check on its unit), conflict, void


@dataclass
class Selection:
    included: list[Find] = field(default_factory=list)
    excluded: list[Excluded] = field(default_factory=list)
    issue_codes: dict[uuid.UUID, list[str]] = field(default_factory=dict)  # included finds' open issues
    unit_errors: dict[uuid.UUID, list[str]] = field(default_factory=dict)  # included finds' units' error codes
    conflicts: dict[uuid.UUID, list[str]] = field(default_factory=dict)  # included finds' open conflicts


def unit_errors(issues: Iterable[Issue], *, cyclic_units: Iterable[Iterable[uuid.UUID]] = (),
                relations: Iterable[Relation] = ()) -> dict[uuid.UUID, list[Issue]]:
    """Error-severity checks that put a unit's place in the sequence in doubt, by unit: checks on the unit
    itself, a matrix cycle on every unit of the circle (``cyclic_units``: the units of each circle), and
    relation errors on both units of the relation."""
    rel = {str(r.id): r for r in relations}
    in_cycle: dict[str, list[uuid.UUID]] = {}
    for comp in cyclic_units:
        members = sorted(comp, key=str)
        for u in members:
            in_cycle[str(u)] = members
    out: dict[uuid.UUID, list[Issue]] = defaultdict(list)
    for i in issues:
        if i.severity != "error" or not i.record_id:
            continue
        if i.record == "unit":
            for u in in_cycle.get(i.record_id, [uuid.UUID(i.record_id)]) if i.code == "MATRIX_CYCLE" \
                    else [uuid.UUID(i.record_id)]:
                out[u].append(i)
        elif i.record == "relation" and i.record_id in rel:
            r = rel[i.record_id]
            for u in {r.upper_unit_id, r.lower_unit_id}:
                out[u].append(i)
    return dict(out)


def select_finds(finds: Iterable[Find], issues: Iterable[Issue], *, strict: bool,
                 units: dict[uuid.UUID, list[Issue]] | None = None,
                 conflicts: dict[tuple[str, str], list[str]] | None = None,
                 unit_codes: dict[uuid.UUID, str] | None = None) -> Selection:
    """Which finds the tables count, and every left-out find with its reason. ``units``: the unit errors
    (``unit_errors``); ``conflicts``: the open conflicts by (record, record id) as field names (a find's own,
    and its unit's); ``unit_codes`` names units in the words."""
    by_find: dict[str, list[Issue]] = defaultdict(list)
    for i in issues:
        if i.record == "find" and i.record_id:
            by_find[i.record_id].append(i)
    units, conflicts, unit_codes = units or {}, conflicts or {}, unit_codes or {}
    out = Selection()
    for f in finds:
        mine = by_find.get(str(f.id), [])
        if f.voided:
            out.excluded.append(Excluded(f, "VOIDED", f"voided: {f.void_reason or 'no reason given'}", "void"))
            continue
        unit = unit_codes.get(f.unit_id, str(f.unit_id))
        errors = [i for i in mine if i.severity == "error"]
        their_unit = units.get(f.unit_id, [])
        open_ = [*(f"find.{x}" for x in conflicts.get(("find", str(f.id)), [])),
                 *(f"unit.{x}" for x in conflicts.get(("unit", str(f.unit_id)), []))]
        if strict and errors:
            out.excluded.append(Excluded(f, errors[0].code, errors[0].message))
            continue
        if strict and their_unit:
            out.excluded.append(Excluded(f, their_unit[0].code, f"its unit {unit}: {their_unit[0].message}", "unit"))
            continue
        if strict and open_:
            out.excluded.append(Excluded(f, "CONFLICT", f"open conflict on {', '.join(open_)} (find {f.number}, unit "
                                                        f"{unit}): resolve it on the Conflicts page", "conflict"))
            continue
        out.included.append(f)
        if mine:
            out.issue_codes[f.id] = sorted({i.code for i in mine})
        if their_unit:
            out.unit_errors[f.id] = sorted({i.code for i in their_unit})
        if open_:
            out.conflicts[f.id] = sorted(open_)
    return out


@dataclass(frozen=True)
class CountRow:
    group: tuple[str, ...]  # (horizon code,) or (horizon code, unit code), then category, material, recovery
    finds: int
    items: int
    weight_g: float | None
    excavated_m3: float | None
    sieved_l: float | None

    @property
    def bags_per_m3(self) -> float | None:
        return self.finds / self.excavated_m3 if self.excavated_m3 else None

    @property
    def items_per_m3(self) -> float | None:
        return self.items / self.excavated_m3 if self.excavated_m3 else None

    @property
    def bags_per_10l(self) -> float | None:
        sieved = self.group[-1] == "sieved"
        return self.finds / self.sieved_l * 10 if sieved and self.sieved_l else None

    @property
    def items_per_10l(self) -> float | None:
        sieved = self.group[-1] == "sieved"
        return self.items / self.sieved_l * 10 if sieved and self.sieved_l else None

    per_m3 = bags_per_m3  # the old names (bags), kept for scripts that read them
    per_10l = bags_per_10l

    def as_dict(self, names: tuple[str, ...]) -> dict[str, Any]:
        return {**dict(zip(names, self.group)), "finds": self.finds, "items": self.items, "weight_g": self.weight_g,
                "excavated_m3": self.excavated_m3, "sieved_l": self.sieved_l, "per_m3": self.per_m3,
                "per_10l": self.per_10l, "bags_per_m3": self.bags_per_m3, "items_per_m3": self.items_per_m3,
                "bags_per_10l": self.bags_per_10l, "items_per_10l": self.items_per_10l}


@dataclass(frozen=True)
class Tally:
    """What a group of finds adds up to."""

    finds: int
    items: int
    weight_g: float | None  # sum of recorded weights; None when no find of the group was weighed


Key = tuple[str, ...]  # (horizon[, unit], category, material, recovery)


def tally(finds: Iterable[Find], units: Iterable[Unit], horizons: Iterable[Horizon], *,
          by_unit: bool = False) -> dict[Key, Tally]:
    """Group finds by horizon (and unit) x category x material x recovery. A unit with no horizon counts under
    the horizon code ``""``. (``sync_server.export_sql.tally_in_db`` is the same grouping done by the database.)"""
    place = _placer(units, horizons, by_unit)
    acc: dict[Key, list[Any]] = {}
    for f in finds:
        a = acc.setdefault((*place(f.unit_id), f.category, f.material, f.recovery), [0, 0, 0.0, 0])
        a[0] += 1
        a[1] += f.count
        if f.weight_g is not None:
            a[2] += f.weight_g
            a[3] += 1
    return {k: Tally(n, items, round(w, 3) if weighed else None) for k, (n, items, w, weighed) in acc.items()}


def _placer(units: Iterable[Unit], horizons: Iterable[Horizon], by_unit: bool) -> Any:
    unit_by_id = {u.id: u for u in units}
    horizon_code = {h.id: h.code for h in horizons}

    def place(unit_id: uuid.UUID) -> tuple[str, ...]:
        u = unit_by_id.get(unit_id)
        h = horizon_code.get(u.horizon_id, "") if u and u.horizon_id else ""
        return (h, u.code if u else str(unit_id)) if by_unit else (h,)

    return place


def count_rows(tallies: dict[Key, Tally], units: Iterable[Unit], horizons: Iterable[Horizon],
               volumes: dict[uuid.UUID, Volume], *, by_unit: bool = False) -> list[CountRow]:
    """The tallies with the excavated and sieved volume of their horizon (unit), in key order."""
    place = _placer(units, horizons, by_unit)
    volume: dict[tuple[str, ...], Volume] = defaultdict(Volume)
    for uid, v in volumes.items():
        volume[place(uid)] = volume[place(uid)] + v
    out = []
    for key in sorted(tallies):
        t = tallies[key]
        v = volume.get(key[:-3])
        out.append(CountRow(key, t.finds, t.items, t.weight_g,
                            round(v.excavated_m3, 6) if v and v.known else None,
                            round(v.sieved_l, 3) if v and v.spits else None))
    return out
