"""The find list: search and filters (unit, category, day, unresolved checks), as one SQL query returning light
rows ready for a recycled list (the widget draws only the rows on screen, so tens of thousands stay smooth).

Each row names the hash of its find's newest photo; the list asks for that photo's thumbnail only when the row is
drawn (``thumbnail``: made once from the file, then read from the tablet's thumbnail folder)."""

from __future__ import annotations

import datetime as dt
import uuid
import zoneinfo
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa

from schema.tables import metadata

from ..photos import photo_folder, thumbnail_if_kept
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
    site_id: uuid.UUID | None = None  # the day's site: lets SQLite walk the (site, number) index


class FindListController:
    def __init__(self, store: TabletStore, *, timezone: str = "UTC"):
        self.store = store
        self.tz = zoneinfo.ZoneInfo(timezone)
        self.photos = photo_folder(store)

    def matching(self, f: FindFilter) -> sa.Select[Any]:
        """The ids and numbers of the finds the filter keeps, newest number first (the find table alone, so
        SQLite can walk an index and stop at a page)."""
        find, unit = metadata.tables["find"], metadata.tables["unit"]
        q = sa.select(find.c.id, find.c.number).order_by(find.c.number.desc())
        if f.site_id is not None:
            q = q.where(find.c.site_id == f.site_id)
        if f.text.strip():
            text = f.text.strip()
            like = f"%{text.lower()}%"
            q = q.where(sa.or_(sa.cast(find.c.number, sa.String).startswith(text), sa.func.lower(find.c.material).like(like),
                               sa.func.lower(sa.func.coalesce(find.c.taxon, "")).like(like),
                               sa.func.lower(find.c.notes).like(like)))
        if f.unit:
            q = q.where(find.c.unit_id.in_(sa.select(unit.c.id).where(unit.c.code == f.unit)))
        if f.category:
            q = q.where(find.c.category == f.category)
        if f.day is not None:
            start = dt.datetime.combine(f.day, dt.time(0), self.tz).astimezone(dt.timezone.utc)
            q = q.where(find.c.found_at >= start, find.c.found_at < start + dt.timedelta(days=1))
        if f.unresolved_only:
            q = q.where(find.c.id.in_(sa.select(live_check.c.find_id).where(live_check.c.confirmed_reason.is_(None))))
        if not f.include_voided:
            q = q.where(find.c.voided.is_(False))
        return q

    def query(self, f: FindFilter, *, limit: int | None = None, offset: int = 0) -> sa.Select[Any]:
        """The rows of one page (all when ``limit`` is None), each one's text put together by SQLite; the time
        shown uses the site's UTC offset of today, a display choice only."""
        find, unit = metadata.tables["find"], metadata.tables["unit"]
        page = self.matching(f)
        if limit is not None:
            page = page.limit(limit).offset(offset)
        page = page.subquery()
        waiting = (sa.select(sa.func.count()).select_from(live_check)
                   .where(live_check.c.find_id == find.c.id, live_check.c.confirmed_reason.is_(None)).scalar_subquery())
        offset_min = int((self.tz.utcoffset(dt.datetime.now()) or dt.timedelta(0)).total_seconds() // 60)
        when = sa.func.strftime("%d/%m %H:%M", sa.type_coerce(find.c.found_at, sa.String), f"{offset_min:+d} minutes")
        material = sa.func.replace(find.c.material, "_", " ")  # words on screen, never a vocabulary's key
        text = (sa.cast(find.c.number, sa.String) + "  " + unit.c.code + "  " + find.c.category + " " + material
                + "  " + find.c.recovery + "  " + sa.func.coalesce(when, ""))
        photo = metadata.tables["photo"]
        newest_photo = (sa.select(photo.c.sha256).where(photo.c.subject_id == find.c.id, photo.c.subject == "find",
                                                        photo.c.voided.is_(False))
                        .order_by(photo.c.taken_at.desc(), photo.c.number.desc()).limit(1).scalar_subquery())
        return (sa.select(sa.type_coerce(find.c.id, sa.String).label("id"), find.c.number, unit.c.code.label("unit"),
                          find.c.category, find.c.voided, waiting.label("open_checks"), text.label("text"),
                          newest_photo.label("photo"))
                .select_from(page.join(find, find.c.id == page.c.id).join(unit, unit.c.id == find.c.unit_id))
                .order_by(page.c.number.desc()))

    def rows(self, f: FindFilter = FindFilter(), *, limit: int | None = None, offset: int = 0) -> list[dict[str, Any]]:
        """One dict per find, newest number first: the fields the list shows, a one-line ``text`` for the row and
        ``photo``, the hash of the find's newest photo ("" when it has none).
        ``limit``/``offset`` give a page (the list opens on its first page and loads more as it is scrolled)."""
        with self.store.read() as conn:
            result = conn.execute(self.query(f, limit=limit, offset=offset)).all()
        return [{"id": r[0], "number": r[1], "unit": r[2], "category": r[3], "voided": bool(r[4]), "open_checks": r[5],
                 "photo": r[7] or "", "text": r[6] + ("  VOID" if r[4] else "") + (f"  {r[5]} {'check' if r[5] == 1 else 'checks'} open" if r[5] else "")}
                for r in result]

    def count(self, f: FindFilter = FindFilter()) -> int:
        """How many finds the filter matches."""
        with self.store.read() as conn:
            return int(conn.execute(sa.select(sa.func.count()).select_from(self.matching(f).order_by(None).subquery()))
                       .scalar_one())

    def thumbnail(self, sha256: str) -> str:
        """The path of a photo's thumbnail for a drawn row ("" when this tablet has neither the file nor a
        thumbnail from camp)."""
        path = thumbnail_if_kept(self.photos, sha256) if sha256 else None
        return str(path) if path is not None else ""

    def units(self) -> list[str]:
        unit = metadata.tables["unit"]
        with self.store.read() as conn:
            return list(conn.execute(sa.select(unit.c.code).order_by(unit.c.code)).scalars())
