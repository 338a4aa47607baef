"""The per-horizon (and per-unit) tallies computed by the database, for stores too big to load as records.

The same grouping as ``schema.analysis.tally`` (a test holds the two equal). The database groups the finds that
are not voided by unit, category, material and recovery straight off the narrow covering index
``ix_find_tally`` (no sort, no table reads); the few groups are then kept for the site's units and summed per
horizon here. Finds left out by strict mode are few: their contributions are read by id and subtracted, which
keeps the index narrow. A season filter reads the table (``season_id`` is not in the index).
"""

from __future__ import annotations

import uuid
from typing import Any, Iterable

import sqlalchemy as sa

from schema.analysis import Key, Tally
from schema.tables import metadata

__all__ = ["tally_in_db"]


def tally_in_db(conn: sa.Connection, *, site_id: uuid.UUID, season_ids: Iterable[uuid.UUID] | None = None,
                exclude: Iterable[uuid.UUID] = (), by_unit: bool = False) -> dict[Key, Tally]:
    f, u, h = (metadata.tables[n] for n in ("find", "unit", "horizon"))
    keys = [f.c.unit_id, f.c.category, f.c.material, f.c.recovery]  # ix_find_tally's order
    q = (sa.select(*keys, sa.func.count(), sa.func.sum(f.c["count"]), sa.func.sum(f.c.weight_g),
                   sa.func.count(f.c.weight_g)).where(sa.not_(f.c.voided)))
    seasons = None if season_ids is None else list(season_ids)
    if seasons is not None:
        q = q.where(f.c.season_id.in_(seasons))
    place = {r.id: ((r.hcode or "", r.code) if by_unit else (r.hcode or "",)) for r in conn.execute(
        sa.select(u.c.id, u.c.code, h.c.code.label("hcode")).select_from(u.outerjoin(h, u.c.horizon_id == h.c.id))
        .where(u.c.site_id == site_id))}
    acc: dict[Key, list[Any]] = {}

    def add(unit_id: uuid.UUID, category: str, material: str, recovery: str, sign: int, n: int, items: int,
            weight: float | None, weighed: int) -> None:
        where = place.get(unit_id)
        if where is None:
            return  # another site's unit
        a = acc.setdefault((*where, category, material, recovery), [0, 0, 0.0, 0])
        a[0] += sign * n
        a[1] += sign * items
        a[2] += sign * (weight or 0.0)
        a[3] += sign * weighed

    for unit_id, category, material, recovery, n, items, weight, weighed in conn.execute(q.group_by(*keys)):
        add(unit_id, category, material, recovery, 1, n, items, weight, weighed)
    ids = list(exclude)
    for i in range(0, len(ids), 500):
        sub = sa.select(*keys, f.c["count"], f.c.weight_g).where(f.c.id.in_(ids[i:i + 500]), sa.not_(f.c.voided))
        if seasons is not None:
            sub = sub.where(f.c.season_id.in_(seasons))
        for unit_id, category, material, recovery, items, weight in conn.execute(sub):
            add(unit_id, category, material, recovery, -1, 1, items, weight, 0 if weight is None else 1)
    return {k: Tally(int(n), int(items), round(w, 3) if weighed else None)
            for k, (n, items, w, weighed) in acc.items() if n > 0}
