"""What validation reads: a site's records as plain data, finds as columns (numpy) so 100k finds check fast."""

from __future__ import annotations

import datetime as dt
import uuid
from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np
from numpy.typing import NDArray

from ..records import AgeDetermination, Find, GnssFix, Horizon, LevelPoint, Relation, Site, Spit, StationSetup, Trench, Unit

__all__ = ["FIND_COLUMNS", "FindColumns", "SiteData"]

FIND_COLUMNS = (
    "id", "number", "trench_id", "unit_id", "spit_id", "category", "recovery", "position_source", "e", "n", "z",
    "found_at", "voided", "gnss_fix_id",
)


@dataclass
class FindColumns:
    id: list[uuid.UUID]
    number: NDArray[np.int64]
    trench_id: list[uuid.UUID]
    unit_id: list[uuid.UUID]
    spit_id: list[uuid.UUID | None]
    category: NDArray[np.str_]
    recovery: NDArray[np.str_]
    position_source: NDArray[np.str_]
    e: NDArray[np.float64]
    n: NDArray[np.float64]
    z: NDArray[np.float64]
    found_epoch_s: NDArray[np.float64]  # UTC seconds since 1970
    voided: NDArray[np.bool_]
    gnss_fix_id: list[uuid.UUID | None]

    def __len__(self) -> int:
        return len(self.id)

    @classmethod
    def from_rows(cls, rows: Iterable[Any]) -> "FindColumns":
        """From rows holding ``FIND_COLUMNS`` (SQL rows, tuples in that order, or Find records)."""
        cols: list[list[Any]] = [[] for _ in FIND_COLUMNS]
        for row in rows:
            values = [getattr(row, c) for c in FIND_COLUMNS] if isinstance(row, Find) else row
            for bucket, v in zip(cols, values):
                bucket.append(v)
        (ids, number, trench, unit, spit, category, recovery, source, e, n, z, found, voided, gnss) = cols
        nan = float("nan")
        return cls(
            id=ids, number=np.asarray(number, dtype=np.int64), trench_id=trench, unit_id=unit, spit_id=spit,
            category=np.asarray(category, dtype=str), recovery=np.asarray(recovery, dtype=str),
            position_source=np.asarray(source, dtype=str),
            e=np.asarray([nan if v is None else v for v in e], dtype=float),
            n=np.asarray([nan if v is None else v for v in n], dtype=float),
            z=np.asarray([nan if v is None else v for v in z], dtype=float),
            found_epoch_s=np.asarray([_epoch(t) for t in found], dtype=float),
            voided=np.asarray(voided, dtype=bool), gnss_fix_id=gnss,
        )

    @classmethod
    def from_finds(cls, finds: Iterable[Find]) -> "FindColumns":
        return cls.from_rows(list(finds))


def _epoch(t: dt.datetime) -> float:
    if t.tzinfo is None:
        t = t.replace(tzinfo=dt.timezone.utc)
    return t.timestamp()


@dataclass
class SiteData:
    site: Site
    trenches: list[Trench] = field(default_factory=list)
    units: list[Unit] = field(default_factory=list)
    relations: list[Relation] = field(default_factory=list)
    horizons: list[Horizon] = field(default_factory=list)
    level_points: list[LevelPoint] = field(default_factory=list)
    spits: list[Spit] = field(default_factory=list)
    setups: list[StationSetup] = field(default_factory=list)
    gnss_fixes: list[GnssFix] = field(default_factory=list)
    ages: list[AgeDetermination] = field(default_factory=list)
    finds: FindColumns = field(default_factory=lambda: FindColumns.from_rows([]))
