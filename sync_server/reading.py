"""Finds and units for scripts (``GET /v1/finds``, ``GET /v1/units``): paged, filtered by trench, unit, season
and change-log position, as each role may see them (``schema.withholding``: an analyst gets possible human
remains unplotted). Ids leave as dashed UUIDs, the API's one form (the stores keep 32-character hex; the records'
JSON shape converts at the edge).

``changed_after`` is a change-log position, the same the tablets pull by: the answer's ``position`` is the log's
top when it was read, so a script that asks again with ``changed_after=<position>`` gets what changed since.
"""

from __future__ import annotations

from typing import Any

import sqlalchemy as sa

from schema import db
from schema.errors import RecordNotFound
from schema.records import REGISTRY
from schema.sync.tables import field_version
from schema.tables import metadata

from .store import ServerStore
from .withholding import withheld_for

__all__ = ["MAX_LIMIT", "list_finds", "list_units"]

MAX_LIMIT = 1000


def _code_ids(conn: sa.Connection, table: str, column: str, value: str, where: str) -> list[Any]:
    t = metadata.tables[table]
    ids = list(conn.execute(sa.select(t.c.id).where(t.c[column] == value)).scalars())
    if not ids:
        known = sorted(conn.execute(sa.select(t.c[column]).distinct()).scalars())
        shown = ", ".join(str(k) for k in known[:20]) + (", ..." if len(known) > 20 else "")
        raise RecordNotFound(f"no {where} is {value!r} (known: {shown or 'none yet'}); give one of those")
    return ids


def _page(store: ServerStore, record: str, *, trench: str | None, unit: str | None, season: str | None,
          changed_after: int | None, limit: int, offset: int, role: str, order: list[str]) -> dict[str, Any]:
    t = metadata.tables[record]
    spec = REGISTRY[record]
    limit = max(1, min(limit, MAX_LIMIT))
    with store.read() as conn:
        position = int(conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0)
        where = []
        if trench is not None:
            where.append(t.c.trench_id.in_(_code_ids(conn, "trench", "code", trench, "trench code")))
        if unit is not None:
            key = "unit_id" if record == "find" else "id"
            where.append(t.c[key].in_(_code_ids(conn, "unit", "code", unit, "unit code")))
        if season is not None:
            if record == "find":
                where.append(t.c.season_id.in_(_code_ids(conn, "season", "label", season, "season label")))
            else:  # a unit belongs to the seasons its finds do
                f = metadata.tables["find"]
                seasons = _code_ids(conn, "season", "label", season, "season label")
                where.append(t.c.id.in_(sa.select(f.c.unit_id).where(f.c.season_id.in_(seasons))))
        if changed_after is not None:
            where.append(t.c.id.in_(sa.select(field_version.c.record_id).where(
                field_version.c.record == record, field_version.c.log_seq > changed_after)))
        total = int(conn.execute(sa.select(sa.func.count()).select_from(t).where(*where)).scalar_one())
        rows = conn.execute(sa.select(t).where(*where).order_by(*(t.c[k] for k in order))
                            .limit(limit).offset(offset)).all()
        hidden = withheld_for(conn, role) if record == "find" and rows else None
    records = [db.from_row(spec, r) for r in rows]
    if hidden:
        records = [hidden.blanked(r) for r in records]
    return {"data": records, "count": total, "offset": offset, "limit": limit, "position": position}


def list_finds(store: ServerStore, *, trench: str | None = None, unit: str | None = None, season: str | None = None,
               changed_after: int | None = None, limit: int = 200, offset: int = 0, role: str = "") -> dict[str, Any]:
    """Finds by number, filtered; ``count`` is every find the filters match (``data`` holds one page)."""
    return _page(store, "find", trench=trench, unit=unit, season=season, changed_after=changed_after, limit=limit,
                 offset=offset, role=role, order=["site_id", "number", "id"])


def list_units(store: ServerStore, *, trench: str | None = None, unit: str | None = None, season: str | None = None,
               changed_after: int | None = None, limit: int = 200, offset: int = 0, role: str = "") -> dict[str, Any]:
    """Units by code, filtered (a season: the units holding finds of it)."""
    return _page(store, "unit", trench=trench, unit=unit, season=season, changed_after=changed_after, limit=limit,
                 offset=offset, role=role, order=["site_id", "code", "id"])
