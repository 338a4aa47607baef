"""The safety log: every caution a tablet asked about and what its recorder answered, for the data manager.

The tablets record these as ``safety_check`` records (shoring at depth, possible human remains, the laser
acknowledged with an instrument setup, heat); they reach the camp with the finds. This module reads them back
with the trench, unit and find they concern put in words. It records what was answered; it never judges a
trench safe or remains handled correctly: local rules and licensed people decide that.
"""

from __future__ import annotations

import csv
import datetime as dt
from pathlib import Path
from typing import Any

import sqlalchemy as sa

from schema.records.safety import KIND_LABELS, SAFETY_KINDS as KINDS
from schema.tables import metadata

from .store import ServerStore

__all__ = ["CSV_COLUMNS", "KINDS", "safety_line", "safety_log", "safety_summary", "write_safety_csv"]

CSV_COLUMNS = ("checked_at", "trench", "unit", "find_number", "kind", "what", "depth_m", "answer", "notified",
               "recorder", "id", "find_id")


def safety_log(store: ServerStore, *, trench: str | None = None, kind: str | None = None,
               since: dt.datetime | None = None, limit: int | None = 500) -> list[dict[str, Any]]:
    """Safety checks, newest first (at most ``limit``; None for all), filtered by trench code, kind and time;
    each as a plain dict with the trench and unit codes and the find's number (None where it concerns none)."""
    if kind is not None and kind not in KINDS:
        raise ValueError(f"no safety check kind is called {kind!r}; choose one of {', '.join(KINDS)}")
    s, t, u, f = (metadata.tables[n] for n in ("safety_check", "trench", "unit", "find"))
    q = (sa.select(s.c.id, s.c.kind, s.c.depth_m, s.c.answer, s.c.notified, s.c.recorder, s.c.checked_at,
                   s.c.find_id, t.c.code.label("trench"), u.c.code.label("unit"), f.c.number.label("find_number"))
         .select_from(s.outerjoin(t, s.c.trench_id == t.c.id).outerjoin(u, s.c.unit_id == u.c.id)
                      .outerjoin(f, s.c.find_id == f.c.id)))
    if trench is not None:
        q = q.where(t.c.code == trench)
    if kind is not None:
        q = q.where(s.c.kind == kind)
    if since is not None:
        q = q.where(s.c.checked_at >= since)
    q = q.order_by(s.c.checked_at.desc(), s.c.id)
    if limit is not None:
        q = q.limit(limit)
    with store.read() as conn:
        return [{**row._asdict(), "what": KIND_LABELS[row.kind]} for row in conn.execute(q)]


def safety_summary(store: ServerStore, *, since: dt.datetime) -> dict[str, Any]:
    """Checks per kind since ``since`` (every kind present, zero when none) and the possible human remains
    among them, newest first: what the Today page shows."""
    s = metadata.tables["safety_check"]
    with store.read() as conn:
        counts = dict(conn.execute(sa.select(s.c.kind, sa.func.count()).where(s.c.checked_at >= since)
                                   .group_by(s.c.kind)).all())
    return {"counts": {k: int(counts.get(k, 0)) for k in KINDS},
            "human_remains": safety_log(store, kind="human_remains", since=since)}


def safety_line(row: dict[str, Any]) -> str:
    """One row of :func:`safety_log` as a line of text: UTC time, where, what (with the depth), who and the
    answer, and who was told."""
    where = " ".join(filter(None, [row["trench"], row["unit"] and f"unit {row['unit']}",
                                   row["find_number"] is not None and f"find {row['find_number']}"]))
    depth = f" at {row['depth_m']:.2f} m" if row["depth_m"] is not None else ""
    told = f" | told: {row['notified']}" if row["notified"] else ""
    return (f"{row['checked_at'].astimezone(dt.timezone.utc):%Y-%m-%d %H:%M}Z  {where or '-'}  {row['what']}{depth}"
            f"  [{row['recorder']}] {row['answer']}{told}")


def write_safety_csv(rows: list[dict[str, Any]], path: Path) -> Path:
    """Write the rows of :func:`safety_log` to ``path`` as CSV (times in UTC, ISO 8601); a partial file never
    appears under the final name."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".part")
    try:
        with tmp.open("w", newline="", encoding="utf-8") as fh:
            w = csv.DictWriter(fh, fieldnames=CSV_COLUMNS, extrasaction="ignore")
            w.writeheader()
            for row in rows:
                w.writerow({**row, "checked_at": row["checked_at"].astimezone(dt.timezone.utc).isoformat()})
        tmp.replace(path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path
