"""The per-horizon (and per-unit) tallies computed by the database, for stores too big to load as records.

The same grouping as ``schema.analysis.tally`` (a test holds the two equal): the database groups finds by unit,
category, material and recovery straight off the covering index ``ix_find_tally``; the few groups are then
summed per horizon here. Voided finds and the given excluded ids are left out. Excluded ids go into a temporary table, so strict mode costs one join, not a long IN list.
"""

from __future__ import annotations

import uuid
from typing import Iterable

import sqlalchemy as sa

from schema.analysis import Key, Tally
from schema.tables import metadata

__all__ = ["tally_in_db"]


def tally_in_db(conn: sa.Connection, *, site_id: uuid.UUID, season_ids: Iterable[uuid.UUID] | None = None,
                exclude: Iterable[uuid.UUID] = (), by_unit: bool = False) -> dict[Key, Tally]:
    f, u, h = (metadata.tables[n] for n in ("find", "unit", "horizon"))
    keys = [f.c.unit_id, f.c.category, f.c.material, f.c.recovery]  # in ix_find_tally's order: no sort, no table
    q = (sa.select(*keys, sa.func.count(), sa.func.sum(f.c["count"]), sa.func.sum(f.c.weight_g),
                   sa.func.count(f.c.weight_g))
         .where(f.c.site_id == site_id, sa.not_(f.c.voided)))
    if season_ids is not None:
        q = q.where(f.c.season_id.in_(list(season_ids)))
    excluded = list(exclude)
    if excluded:
        tmp = sa.Table("export_excluded", sa.MetaData(), sa.Column("id", sa.Uuid(), primary_key=True),
                       prefixes=["TEMPORARY"])
        tmp.create(conn, checkfirst=True)
        conn.execute(tmp.delete())
        conn.execute(tmp.insert(), [{"id": i} for i in excluded])
        q = q.where(f.c.id.notin_(sa.select(tmp.c.id)))
    place = {r.id: ((r.hcode or "", r.code) if by_unit else (r.hcode or "",)) for r in conn.execute(
        sa.select(u.c.id, u.c.code, h.c.code.label("hcode")).select_from(u.outerjoin(h, u.c.horizon_id == h.c.id)))}
    acc: dict[Key, list[float]] = {}
    for unit_id, category, material, recovery, n, items, weight, weighed in conn.execute(q.group_by(*keys)):
        where = place.get(unit_id, ("", str(unit_id)) if by_unit else ("",))
        a = acc.setdefault((*where, category, material, recovery), [0, 0, 0.0, 0])
        a[0] += n
        a[1] += items
        a[2] += weight or 0.0
        a[3] += weighed
    if excluded:
        conn.execute(sa.text("DROP TABLE export_excluded"))
    return {k: Tally(int(n), int(items), round(w, 3) if weighed else None) for k, (n, items, w, weighed) in acc.items()}
