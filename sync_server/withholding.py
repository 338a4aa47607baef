"""The camp server's reading of ``schema.withholding``: which finds it holds are flagged as possible human
remains (their rows, and finds still pending, from their versions), for one reader's role."""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa

from schema.sync import VersionSet
from schema.sync.replica import record_versions
from schema.sync.tables import pending_row
from schema.tables import metadata
from schema.withholding import Withheld, withheld, withholds

__all__ = ["withheld_for"]


@dataclass(frozen=True)
class _Held:
    """A pending find or sample as its winning versions say (the fields ``schema.withholding.withheld`` reads)."""

    id: uuid.UUID
    human_remains: bool = False
    shot_id: uuid.UUID | None = None
    gnss_fix_id: uuid.UUID | None = None
    find_id: uuid.UUID | None = None


def withheld_for(conn: sa.Connection, role: str) -> Withheld:
    """What ``role`` is not given, as the store holds it now (nothing is read for a role that sees everything)."""
    if not withholds(role):
        return Withheld()
    f, s = metadata.tables["find"], metadata.tables["sample"]
    finds: list[Any] = list(conn.execute(sa.select(f.c.id, f.c.human_remains, f.c.shot_id, f.c.gnss_fix_id)
                                         .where(f.c.human_remains)).all())
    finds += [x for x in _pending(conn, "find") if x.human_remains]
    flagged = [x.id for x in finds]
    samples: list[Any] = []
    for i in range(0, len(flagged), 500):
        samples += conn.execute(sa.select(s.c.id, s.c.find_id).where(s.c.find_id.in_(flagged[i:i + 500]))).all()
    samples += _pending(conn, "sample")
    return withheld(role, finds, samples)


def _pending(conn: sa.Connection, record: str) -> list[_Held]:
    """Records of ``record`` the store holds only as versions (pending rows), read from their winning values."""
    ids = list(conn.execute(sa.select(pending_row.c.record_id).where(pending_row.c.record == record)).scalars())
    if not ids:
        return []
    state = VersionSet.of(v for v in record_versions(conn, ids) if v.record == record)
    return [_Held(id=rid, human_remains=state.value((record, rid, "human_remains")) is True,
                  shot_id=_uuid(state.value((record, rid, "shot_id"))),
                  gnss_fix_id=_uuid(state.value((record, rid, "gnss_fix_id"))),
                  find_id=_uuid(state.value((record, rid, "find_id")))) for rid in ids]


def _uuid(value: Any) -> uuid.UUID | None:
    try:
        return uuid.UUID(str(value)) if value is not None else None
    except ValueError:
        return None
