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
        """One row per find, its text put together by SQLite (tens of thousands of rows open in a blink; the
        time shown uses the site's UTC offset of today, a display choice only)."""
        find, unit = metadata.tables["find"], metadata.tables["unit"]
        waiting = (sa.select(live_check.c.find_id, sa.func.count().label("n"))
                   .where(live_check.c.confirmed_reason.is_(None)).group_by(live_check.c.find_id).subquery())
        open_checks = sa.func.coalesce(waiting.c.n, 0)
        offset = self.tz.utcoffset(dt.datetime.now()) or dt.timedelta(0)
        when = sa.func.strftime("%d/%m %H:%M", sa.type_coerce(find.c.found_at, sa.String),
                                f"{int(offset.total_seconds() // 60):+d} minutes")
        text = (sa.cast(find.c.number, sa.String) + "  " + unit.c.code + "  " + find.c.category + " " + find.c.material
                + "  " + find.c.recovery + "  " + sa.func.coalesce(when, ""))
        q = (sa.select(sa.type_coerce(find.c.id, sa.String).label("id"), find.c.number, unit.c.code.label("unit"),
                       find.c.category, find.c.voided, open_checks.label("open_checks"), text.label("text"))
             .select_from(find.join(unit, unit.c.id == find.c.unit_id).outerjoin(waiting, waiting.c.find_id == find.c.id))
             .order_by(find.c.number.desc()))
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
        return [{"id": r[0], "number": r[1], "unit": r[2], "category": r[3], "voided": bool(r[4]), "open_checks": r[5],
                 "text": r[6] + ("  VOID" if r[4] else "") + (f"  {r[5]} check(s) open" if r[5] else "")}
                for r in result]

    def units(self) -> list[str]:
        unit = metadata.tables["unit"]
        with self.store.read() as conn:
            return list(conn.execute(sa.select(unit.c.code).order_by(unit.c.code)).scalars())
