"""What analysts count: finds per horizon (and per unit) by category, material and recovery, with the excavated and
sieved volumes they came from, and which finds are left out and why. Plain functions over records and issues.

- Excavated volume of a spit is its area times its thickness (m3); a unit's and a horizon's are the sums over
  their spits. A unit dug without spits but with level points on its top and bottom surfaces gets the volume
  between the two surfaces over its trench's outline instead (midpoint rule on a 5 cm grid; exact for planes).
  Sieved volume is the recorded sieved litres, summed the same way.
- Densities: finds (and items, a find's ``count``) per m3 of excavated volume, and per 10 L of sieved volume
  for sieved finds only. A volume of zero or none gives no density (an empty cell), never an infinity.
- Plotted, sieved, surface and core finds are counted apart (``recovery``): they were recovered differently.
- Exclusion: a voided find is always left out (code ``VOIDED``). In strict mode a find any error-severity
  check names is left out too, with that check's code and message. Otherwise such finds are counted, and carry
  their issue codes.
"""

from __future__ import annotations

import uuid
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any, Iterable

from .records import Find, Horizon, LevelPoint, Spit, Unit
from .strata.issues import Issue

__all__ = ["CountRow", "Excluded", "Selection", "Tally", "Volume", "count_rows", "select_finds", "spit_volume_m3",
           "surface_volume_m3", "tally", "unit_volumes"]


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


def surface_volume_m3(top: list[LevelPoint], bottom: list[LevelPoint], outline: list[tuple[float, float]], *,
                      cell_m: float = 0.05) -> float:
    """Volume between a unit's top and bottom surfaces over an outline: the thickness (never below zero) at the
    centre of each ``cell_m`` square inside the outline, times the cell's area."""
    import numpy as np

    from .strata.geometry import Surface, points_in_ring

    ring = np.asarray(outline, dtype=float)
    (e0, n0), (e1, n1) = ring.min(axis=0), ring.max(axis=0)
    xs = np.arange(e0 + cell_m / 2, e1, cell_m)
    ys = np.arange(n0 + cell_m / 2, n1, cell_m)
    gx, gy = (a.ravel() for a in np.meshgrid(xs, ys))
    inside = points_in_ring(gx, gy, ring)
    gx, gy = gx[inside], gy[inside]
    zt, _ = Surface.from_points([(p.e, p.n, p.z) for p in top]).z_at(gx, gy)
    zb, _ = Surface.from_points([(p.e, p.n, p.z) for p in bottom]).z_at(gx, gy)
    return float(np.clip(np.nan_to_num(zt - zb), 0, None).sum() * cell_m * cell_m)


def unit_volumes(spits: Iterable[Spit], *, units: Iterable[Unit] = (), levels: Iterable[LevelPoint] = (),
                 outlines: dict[uuid.UUID, list[tuple[float, float]]] | None = None) -> dict[uuid.UUID, Volume]:
    """Each unit's volume: from its spits, else (given ``units``, their level points and the trench
    ``outlines`` by trench id) from its top and bottom surfaces."""
    out: dict[uuid.UUID, Volume] = defaultdict(Volume)
    for s in spits:
        out[s.unit_id] = out[s.unit_id] + Volume(spit_volume_m3(s), s.sieved_volume_l or 0.0, 1)
    by_surface: dict[tuple[uuid.UUID, str], list[LevelPoint]] = defaultdict(list)
    for p in levels:
        by_surface[(p.unit_id, p.surface)].append(p)
    for u in units:
        top, bottom = by_surface.get((u.id, "top")), by_surface.get((u.id, "bottom"))
        outline = (outlines or {}).get(u.trench_id)
        if u.id in out or not top or not bottom or not outline:
            continue
        out[u.id] = Volume(surface_volume_m3(top, bottom, outline), 0.0, 0, 1)
    return dict(out)


@dataclass(frozen=True)
class Excluded:
    find: Find
    code: str
    message: str


@dataclass
class Selection:
    included: list[Find] = field(default_factory=list)
    excluded: list[Excluded] = field(default_factory=list)
    issue_codes: dict[uuid.UUID, list[str]] = field(default_factory=dict)  # included finds' open issues


def select_finds(finds: Iterable[Find], issues: Iterable[Issue], *, strict: bool) -> Selection:
    """Which finds the tables count, and every left-out find with its reason."""
    by_find: dict[str, list[Issue]] = defaultdict(list)
    for i in issues:
        if i.record == "find" and i.record_id:
            by_find[i.record_id].append(i)
    out = Selection()
    for f in finds:
        mine = by_find.get(str(f.id), [])
        if f.voided:
            out.excluded.append(Excluded(f, "VOIDED", f"voided: {f.void_reason or 'no reason given'}"))
            continue
        errors = [i for i in mine if i.severity == "error"]
        if strict and errors:
            out.excluded.append(Excluded(f, errors[0].code, errors[0].message))
            continue
        out.included.append(f)
        if mine:
            out.issue_codes[f.id] = sorted({i.code for i in mine})
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
    def per_m3(self) -> float | None:
        return self.finds / self.excavated_m3 if self.excavated_m3 else None

    @property
    def per_10l(self) -> float | None:
        sieved = self.group[-1] == "sieved"
        return self.finds / self.sieved_l * 10 if sieved and self.sieved_l else None

    def as_dict(self, names: tuple[str, ...]) -> dict[str, Any]:
        return {**dict(zip(names, self.group)), "finds": self.finds, "items": self.items, "weight_g": self.weight_g,
                "excavated_m3": self.excavated_m3, "sieved_l": self.sieved_l, "per_m3": self.per_m3,
                "per_10l": self.per_10l}


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
