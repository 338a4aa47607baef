"""The find list: search and filters (unit, category, day, unresolved checks), as one SQL query returning light
rows ready for a recycled list (the widget draws only the rows on screen, so tens of thousands stay smooth)."""

from __future__ import annotations

import datetime as dt
import zoneinfo
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa

from schema.tables import metadata

from ..store import TabletStore
from ..tables import live_check

__all__ = ["FindFilter", "FindListController"]


@dataclass(frozen=True)
class FindFilter:
    """What the list shows: ``text`` matches a number's start, the material, taxon or notes."""

    text: str = ""
    unit: str | None = None
    category: str | None = None
    day: dt.date | None = None
    unresolved_only: bool = False
    include_voided: bool = True


class FindListController:
    def __init__(self, store: TabletStore, *, timezone: str = "UTC"):
        self.store = store
        self.tz = zoneinfo.ZoneInfo(timezone)

    def query(self, f: FindFilter) -> sa.Select[Any]:
        find, unit = metadata.tables["find"], metadata.tables["unit"]
        open_checks = (sa.select(sa.func.count()).select_from(live_check)
                       .where(live_check.c.find_id == find.c.id, live_check.c.confirmed_reason.is_(None))
                       .scalar_subquery())
        q = (sa.select(find.c.id, find.c.number, unit.c.code.label("unit"), find.c.category, find.c.material,
                       find.c.recovery, find.c.found_at, find.c.voided, find.c.label_printed_at,
                       open_checks.label("open_checks"))
             .select_from(find.join(unit, unit.c.id == find.c.unit_id)).order_by(find.c.number.desc()))
        if f.text.strip():
            text = f.text.strip()
            like = f"%{text.lower()}%"
            q = q.where(sa.or_(sa.cast(find.c.number, sa.String).startswith(text), sa.func.lower(find.c.material).like(like),
                               sa.func.lower(sa.func.coalesce(find.c.taxon, "")).like(like),
                               sa.func.lower(find.c.notes).like(like)))
        if f.unit:
            q = q.where(unit.c.code == f.unit)
        if f.category:
            q = q.where(find.c.category == f.category)
        if f.day is not None:
            start = dt.datetime.combine(f.day, dt.time(0), self.tz).astimezone(dt.timezone.utc)
            q = q.where(find.c.found_at >= start, find.c.found_at < start + dt.timedelta(days=1))
        if f.unresolved_only:
            q = q.where(open_checks > 0)
        if not f.include_voided:
            q = q.where(find.c.voided.is_(False))
        return q

    def rows(self, f: FindFilter = FindFilter()) -> list[dict[str, Any]]:
        """One dict per find: the fields the list shows and a one-line ``text`` for the row."""
        with self.store.read() as conn:
            result = conn.execute(self.query(f)).all()
        out = []
        for r in result:
            flags = ("VOID " if r.voided else "") + (f"{r.open_checks} check(s) open" if r.open_checks else "")
            when = r.found_at.astimezone(self.tz).strftime("%d %b %H:%M") if r.found_at else ""
            out.append({"id": str(r.id), "number": r.number, "unit": r.unit, "category": r.category,
                        "open_checks": r.open_checks, "voided": bool(r.voided),
                        "text": f"{r.number}  {r.unit}  {r.category} {r.material}  {r.recovery}  {when}  {flags}".rstrip()})
        return out

    def units(self) -> list[str]:
        unit = metadata.tables["unit"]
        with self.store.read() as conn:
            return list(conn.execute(sa.select(unit.c.code).order_by(unit.c.code)).scalars())
