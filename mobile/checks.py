"""Live checks on the tablet: the same rules the server runs, on what this tablet holds, right after a save.

They never stop a save; the recorder sees each problem with its fix and corrects the record or confirms it
(the confirmation reason travels to the data manager with the record's notes once sync lands). A level or a
relation changes what the finds of its units are checked against: ``recheck_units`` runs the checks again on
those finds, keeps the result beside each find, and says how many changed. Changes that arrive from the camp (a
pull, a return bundle: corrections, resolutions, other tablets' finds and levels) can open or close a check on
any find: ``recheck_arrived`` runs the checks over the tablet's whole site and rewrites the kept checks of the
finds whose result changed. Told what arrived, it does nothing when no arrived version touches a record or field
the checks read (``reads_checks``: a new number block, a photo, a sample, a find's notes), which spares the
tablet a whole-site validation (about a second at 100k finds) after such a sync.
"""

from __future__ import annotations

import functools
import typing
import uuid
from dataclasses import dataclass, field
from typing import Iterable

import sqlalchemy as sa

from schema.records import Find
from schema.strata import Issue, validate
from schema.tables import metadata

from .store import TabletStore
from .tables import live_check

__all__ = ["Rechecked", "check_find", "check_matrix", "keep_checks", "reads_checks", "recheck_arrived",
           "recheck_units"]


def check_find(store: TabletStore, find: Find) -> list[Issue]:
    """Issues about this find (and its unit's surfaces) on this tablet's data, errors first."""
    report = validate(store.site_data(site_id=find.site_id, only_find=find.id))
    mine = str(find.id)
    unit = str(find.unit_id)
    return [i for i in report.issues if i.record_id == mine or (i.record == "unit" and i.record_id == unit
                                                                and i.code.startswith("SURFACE_"))]


def check_matrix(store: TabletStore) -> list[Issue]:
    """Matrix problems (not the informational ones) after a relation or unit is saved."""
    report = validate(store.site_data())
    return [i for i in report.matrix.issues if i.severity != "info"]


def keep_checks(conn: sa.Connection, find_id: uuid.UUID, issues: Iterable[Issue]) -> set[str]:
    """Replace a find's kept checks by ``issues`` (confirmations of codes that still apply are kept); returns the
    codes now open."""
    kept = dict(conn.execute(sa.select(live_check.c.code, live_check.c.confirmed_reason)
                             .where(live_check.c.find_id == find_id)).all())
    conn.execute(live_check.delete().where(live_check.c.find_id == find_id))
    rows = {i.code: {"find_id": find_id, "code": i.code, "severity": i.severity, "message": i.message,
                     "fix": i.fix, "confirmed_reason": kept.get(i.code)} for i in issues if i.severity != "info"}
    if rows:
        conn.execute(live_check.insert(), list(rows.values()))
    return set(rows)


@dataclass
class Rechecked:
    """Finds checked again after a level or relation change: how many, and whose open checks changed."""

    checked: int = 0
    now_failing: list[int] = field(default_factory=list)  # numbers of finds with a check that was not open before
    cleared: list[int] = field(default_factory=list)  # numbers of finds that no longer fail a check they failed

    def sentence(self, what: str) -> str:
        if self.checked == 0:
            return f"No finds of {what} to check again."
        parts = [f"Checks run again on {self.checked} {'find' if self.checked == 1 else 'finds'} of {what}"]
        if not self.now_failing and not self.cleared:
            parts.append("nothing changed")
        if self.now_failing:
            n = len(self.now_failing)
            parts.append(f"CHECK: {n} {'find now fails' if n == 1 else 'finds now fail'} a check "
                         f"({_numbers(self.now_failing)}; see Finds, Open checks)")
        if self.cleared:
            n = len(self.cleared)
            parts.append(f"{n} {'find passes' if n == 1 else 'finds pass'} a check it failed ({_numbers(self.cleared)})")
        return ": ".join(parts[:1]) + ": " + "; ".join(parts[1:]) + "."


def _numbers(numbers: list[int]) -> str:
    shown = ", ".join(str(n) for n in sorted(numbers)[:10])
    return shown + (f" and {len(numbers) - 10} more" if len(numbers) > 10 else "")


def recheck_units(store: TabletStore, unit_ids: Iterable[uuid.UUID]) -> Rechecked:
    """Run the live checks again on the finds (not voided) of these units and keep the result; one validation
    of the site, one transaction."""
    units = set(unit_ids)
    t = metadata.tables["find"]
    with store.read() as conn:
        finds = conn.execute(sa.select(t.c.id, t.c.number, t.c.site_id)
                             .where(t.c.unit_id.in_(units), t.c.voided.is_(False))).all()
    out = Rechecked(checked=len(finds))
    if not finds:
        return out
    report = validate(store.site_data(site_id=finds[0].site_id))
    by_find: dict[str, list[Issue]] = {}
    for issue in report.issues:
        if issue.record == "find":
            by_find.setdefault(issue.record_id, []).append(issue)
    with store.atomic() as conn:
        for find_id, number, _site in finds:
            before = set(conn.execute(sa.select(live_check.c.code).where(live_check.c.find_id == find_id)).scalars())
            after = keep_checks(conn, find_id, by_find.get(str(find_id), []))
            if after - before:
                out.now_failing.append(number)
            elif before - after:
                out.cleared.append(number)
    return out


def _surface_issues(issues: Iterable[Issue]) -> dict[str, list[Issue]]:
    """A unit's surface issues, by unit id: a find's live check carries those of its unit (``check_find``)."""
    out: dict[str, list[Issue]] = {}
    for i in issues:
        if i.record == "unit" and i.code.startswith("SURFACE_") and i.record_id:
            out.setdefault(i.record_id, []).append(i)
    return out


@functools.cache
def _checked() -> dict[str, frozenset[str] | None]:
    """Record name -> the fields the checks read (None: every field), from what validation is given
    (``schema.strata.SiteData``: whole records, and the finds' ``FIND_COLUMNS``, chosen by site)."""
    from schema.records import Record
    from schema.strata.data import FIND_COLUMNS, FindColumns, SiteData

    out: dict[str, frozenset[str] | None] = {}
    for hint in typing.get_type_hints(SiteData).values():
        cls = (typing.get_args(hint) or (hint,))[0]
        if cls is FindColumns:
            out[Find.record_name] = frozenset((*FIND_COLUMNS, "site_id"))
        elif isinstance(cls, type) and issubclass(cls, Record):
            out[cls.record_name] = None
        else:
            raise TypeError(f"SiteData holds {hint}: say in mobile.checks._checked which versions change it")
    return out


def reads_checks(record: str, field_name: str) -> bool:
    """Whether a version of this record's field can change what the checks find (validation reads it)."""
    checked = _checked()
    if record not in checked:
        return False
    fields = checked[record]
    return fields is None or field_name in fields


def recheck_arrived(store: TabletStore, arrived: Iterable[tuple[str, str]] | None = None) -> Rechecked | None:
    """After changes arrived from the camp (``mobile.sync`` pull, ``mobile.bundles`` return bundle): the checks
    of every find (not voided) run again over the site as the tablet now holds it, as ``check_find`` runs them
    after a save; a find whose open checks changed has them rewritten (confirmations of codes that still apply
    kept), the rest are left alone (a voided find's are too). One validation per site, one transaction.

    ``arrived``: the (record, field) of each version that arrived; when none of them is read by the checks
    (``reads_checks``), nothing runs and None is returned. Not given: the checks run."""
    if arrived is not None and not any(reads_checks(record, name) for record, name in arrived):
        return None
    t = metadata.tables["find"]
    with store.read() as conn:
        finds = conn.execute(sa.select(t.c.id, t.c.number, t.c.site_id, t.c.unit_id)
                             .where(t.c.voided.is_(False))).all()
        stored: dict[str, set[tuple[str, str, str]]] = {}
        for fid, code, message, fix in conn.execute(
                sa.select(live_check.c.find_id, live_check.c.code, live_check.c.message, live_check.c.fix)):
            stored.setdefault(str(fid), set()).add((code, message, fix))
    out = Rechecked(checked=len(finds))
    wanted: dict[str, list[Issue]] = {}
    for site_id in sorted({f.site_id for f in finds}, key=str):
        report = validate(store.site_data(site_id=site_id))
        surfaces = _surface_issues(report.issues)
        for issue in report.issues:
            if issue.record == "find" and issue.record_id:
                wanted.setdefault(issue.record_id, []).append(issue)
        for f in finds:
            if f.site_id == site_id and str(f.unit_id) in surfaces:
                wanted.setdefault(str(f.id), []).extend(surfaces[str(f.unit_id)])
    changed = []
    for f in finds:
        now = set({i.code: (i.code, i.message, i.fix) for i in wanted.get(str(f.id), [])
                   if i.severity != "info"}.values())  # one kept check per code, as keep_checks keeps them
        if now != stored.get(str(f.id), set()):
            changed.append(f)
    if not changed:
        return out
    with store.atomic() as conn:
        for f in changed:
            before = {code for code, _m, _f in stored.get(str(f.id), set())}
            after = keep_checks(conn, f.id, wanted.get(str(f.id), []))
            if after - before:
                out.now_failing.append(f.number)
            elif before - after:
                out.cleared.append(f.number)
    return out
