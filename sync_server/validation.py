"""Validation on the server: run the shared rules over the server store, keep the issues (with managers'
acceptances) in ``validation_issue``, list and accept them. Called by ``baulk validate`` and, once sync
lands, after every merge. Never blocks anything: it only writes issues."""

from __future__ import annotations

import datetime as dt
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import sqlalchemy as sa

from schema.errors import RecordNotFound
from schema.strata import Report, SiteData, validate

from schema.sync.replica import state_get, state_set
from schema.sync.tables import field_version

from .store import ServerStore
from .tables import validation_issue as T

__all__ = ["RevalidateAfterAnswer", "Revalidator", "RunSummary", "accept_issue", "list_issues", "run_validation"]


@dataclass(frozen=True)
class RunSummary:
    new: int
    still_open: int
    resolved: int
    accepted_open: int


def _context(data: SiteData) -> dict[str, tuple[str | None, str | None]]:
    """record id -> (trench code, unit code), for filtering issues by trench and unit."""
    trench = {t.id: t.code for t in data.trenches}
    units = {u.id: u for u in data.units}
    ctx: dict[str, tuple[str | None, str | None]] = {}
    for u in data.units:
        ctx[str(u.id)] = (trench.get(u.trench_id), u.code)
    f = data.finds
    for fid, tid, uid in zip(f.id, f.trench_id, f.unit_id):
        unit = units.get(uid)
        ctx[str(fid)] = (trench.get(tid), unit.code if unit else None)
    return ctx


def run_validation(store: ServerStore, *, now: dt.datetime | None = None,
                   site_id: uuid.UUID | None = None) -> tuple[Report, RunSummary]:
    """Validate the site and store the run: new issues added, still-present ones refreshed, gone ones closed."""
    with store.read() as conn:  # read before the data: the data is at least this new
        seen = int(conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0)
    return store_run(store, store.site_data(site_id=site_id), read_at=seen, now=now)


def store_run(store: ServerStore, data: SiteData, *, read_at: int,
              now: dt.datetime | None = None) -> tuple[Report, RunSummary]:
    """Validate ``data``, read when the change log reached ``read_at``, and store the issues, unless a run over
    newer data is stored already (another process validating the same store: a command beside ``baulk serve``);
    then the stored issues stay and the summary says what this run would have changed."""
    now = now or dt.datetime.now(dt.timezone.utc)
    seen = read_at
    report = validate(data)
    ctx = _context(data)
    current = {i.key: i for i in report.issues}
    with store.atomic() as conn:
        store._serialize(conn, "validation")  # noqa: SLF001 - one run at a time
        checked = f"checked:{data.site.id.hex}"  # the change-log position the stored issues were checked at
        if int(state_get(conn, checked, "0") or 0) > seen:
            # another process (a command beside `baulk serve`) stored a run over newer data meanwhile: keep it
            return report, _summary(conn, data.site.id, current)
        state_set(conn, checked, seen)
        existing = {r.key: r for r in conn.execute(sa.select(T).where(T.c.site_id == data.site.id))}
        new = [k for k in current if k not in existing]
        unchanged: list[str] = []
        inserts: list[dict[str, Any]] = []
        for key, i in current.items():
            trench, unit = ctx.get(i.record_id or "", (None, None))
            values = dict(code=i.code, severity=i.severity, record=i.record, record_id=i.record_id, label=i.label,
                          message=i.message, fix=i.fix, value=None if i.value is None else str(i.value),
                          site_id=data.site.id, trench=trench, unit=unit, open=True)
            if key not in existing:
                inserts.append({"key": key, "first_seen_at": now, "last_seen_at": now, **values})
            elif all(getattr(existing[key], k) == v for k, v in values.items()):
                unchanged.append(key)  # still there, as it was: only its last-seen time moves (in bulk below)
            else:
                conn.execute(T.update().where(T.c.key == key).values(last_seen_at=now, **values))
        if inserts:
            conn.execute(T.insert(), inserts)
        for k in range(0, len(unchanged), 500):
            conn.execute(T.update().where(T.c.key.in_(unchanged[k:k + 500])).values(last_seen_at=now))
        gone = [k for k, r in existing.items() if k not in current and r.open]
        if gone:
            conn.execute(T.update().where(T.c.key.in_(gone)).values(open=False))
        accepted = conn.execute(
            sa.select(sa.func.count()).select_from(T).where(T.c.open, T.c.accepted_at.is_not(None))
        ).scalar_one()
    return report, RunSummary(len(new), len(current) - len(new), len(gone), int(accepted))


def _summary(conn: sa.Connection, site_id: uuid.UUID, current: dict[str, Any]) -> RunSummary:
    """What a run over ``current`` would find against the stored issues, written by nobody."""
    existing = {r.key: r for r in conn.execute(sa.select(T).where(T.c.site_id == site_id))}
    new = sum(1 for k in current if k not in existing)
    gone = sum(1 for k, r in existing.items() if k not in current and r.open)
    accepted = sum(1 for k in current if k in existing and existing[k].accepted_at is not None)
    return RunSummary(new, len(current) - new, gone, accepted)


def validate_after_merge(store: ServerStore) -> None:
    """Re-run validation once a merge changed something (validation never blocks the merge itself)."""
    import logging

    try:
        run_validation(store)
    except RecordNotFound:
        pass  # no site set up yet: nothing to check
    except Exception:  # noqa: BLE001 - a failing check must not take the server down; it is logged
        logging.getLogger("baulk.validation").exception("validation after a merge failed")


class Revalidator:
    """Validation after merges, coalesced: however many pushes land while a run is going, one more run follows
    it, never a queue of them (a run reads the whole site; twenty tablets syncing at once must not start twenty).

    Call it after every merge that changed something (from a background task); it returns at once when a run is
    already going, and that run goes round again to pick the new data up. ``if_changed`` runs only when the store
    counted a change (``ServerStore.changes``) after the latest run started.
    """

    def __init__(self, store: ServerStore) -> None:
        import threading

        self.store = store
        self._running = threading.Lock()
        self._flag = threading.Lock()
        self._dirty = False
        self._covered = -1  # the store's change count when the latest run started
        self.runs = 0

    def __call__(self) -> None:
        with self._flag:
            self._dirty = True
        while True:
            if not self._running.acquire(blocking=False):
                return  # the run in progress will see the flag
            try:
                while self._take():
                    validate_after_merge(self.store)
                    self.runs += 1
            finally:
                self._running.release()
            with self._flag:  # a request that came between the last check and the release
                if not self._dirty:
                    return

    def if_changed(self) -> None:
        """Run (coalesced, as a call) unless every change the store counted came before the latest run began."""
        changes = getattr(self.store, "changes", None)
        if changes is not None and changes <= self._covered:
            return
        self()

    def _take(self) -> bool:
        with self._flag:
            dirty, self._dirty = self._dirty, False
            if dirty:  # a change counted before this point is committed, so this run reads it
                self._covered = getattr(self.store, "changes", -1)
            return dirty


class RevalidateAfterAnswer:
    """ASGI middleware: when a request changed what the checks read (a push, a resolution, a camp edit: anything
    that called ``ServerStore.mark_changed``), validation runs again once its answer is sent, coalesced through
    the app's ``Revalidator`` (``app.state.revalidate``). So the issue list follows every change made through the
    server without each route asking for it."""

    def __init__(self, app: Any) -> None:
        self.app = app

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        state = scope["app"].state
        store = getattr(state, "store", None)
        before = getattr(store, "changes", 0)
        await self.app(scope, receive, send)
        if getattr(store, "changes", 0) != before:
            from starlette.concurrency import run_in_threadpool

            await run_in_threadpool(state.revalidate.if_changed)


def _row(r: Any) -> dict[str, Any]:
    d = dict(r._mapping)
    for k in ("first_seen_at", "last_seen_at", "accepted_at"):
        d[k] = d[k].isoformat() if d[k] else None
    d["site_id"] = str(d["site_id"])
    return d


def list_issues(store: ServerStore, *, code: str | None = None, severity: str | None = None,
                trench: str | None = None, unit: str | None = None, include_closed: bool = False,
                include_accepted: bool = True, limit: int = 1000, offset: int = 0) -> list[dict[str, Any]]:
    """Stored issues, errors first; filters by code, severity, trench and unit."""
    q = sa.select(T)
    for col, value in (("code", code), ("severity", severity), ("trench", trench), ("unit", unit)):
        if value is not None:
            q = q.where(T.c[col] == value)
    if not include_closed:
        q = q.where(T.c.open)
    if not include_accepted:
        q = q.where(T.c.accepted_at.is_(None))
    rank = sa.case({"error": 0, "warning": 1}, value=T.c.severity, else_=2)
    q = q.order_by(rank, T.c.code, T.c.label, T.c.key).limit(limit).offset(offset)
    with store.read() as conn:
        return [_row(r) for r in conn.execute(q)]


def accept_issue(store: ServerStore, *, key: str, by: str, reason: str,
                 now: dt.datetime | None = None) -> dict[str, Any]:
    """A manager accepts an issue with a reason (it stays listed, marked accepted, until the data change)."""
    if not reason.strip():
        raise ValueError("give a reason for accepting the issue, e.g. 'bioturbation: krotovina seen in section'")
    with store.atomic() as conn:
        done = conn.execute(T.update().where(T.c.key == key).values(
            accepted_at=now or dt.datetime.now(dt.timezone.utc), accepted_by=by, accepted_reason=reason.strip()))
        if done.rowcount != 1:
            raise RecordNotFound(f"no validation issue has key {key!r}; list them with baulk validate or GET /v1/issues")
        row = conn.execute(sa.select(T).where(T.c.key == key)).one()
    return _row(row)


REPORT_COLUMNS = ("severity", "code", "label", "message", "fix", "value", "trench", "unit", "record", "record_id",
                  "key", "open", "accepted_by", "accepted_reason")


def write_report(rows: list[dict[str, Any]], out: Path) -> tuple[Path, Path]:
    """Write ``issues.json`` and ``issues.csv`` into ``out``; returns both paths."""
    import csv
    import json

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    jpath, cpath = out / "issues.json", out / "issues.csv"
    tmp = jpath.with_suffix(".json.part")
    tmp.write_text(json.dumps(rows, indent=2, default=str) + "\n")
    tmp.replace(jpath)
    tmp = cpath.with_suffix(".csv.part")
    with tmp.open("w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=REPORT_COLUMNS, extrasaction="ignore")
        w.writeheader()
        w.writerows(rows)
    tmp.replace(cpath)
    return jpath, cpath


def tablet_rows(report: Report, data: SiteData) -> list[dict[str, Any]]:
    """Issues of a tablet file's own validation, shaped like the server's stored rows."""
    ctx = _context(data)
    rows = []
    for i in report.issues:
        trench, unit = ctx.get(i.record_id or "", (None, None))
        rows.append({**i.as_dict(), "trench": trench, "unit": unit, "open": True, "accepted_by": None,
                     "accepted_reason": None, "value": None if i.value is None else str(i.value)})
    return rows


def run_validation_job(*, database_url: str | None, out: Path, tablet_data: SiteData | None = None,
                       tablet_name: str = "") -> dict[str, Any]:
    """What ``baulk validate`` does: validate a server store (issues stored) or a tablet's data, write files."""
    from collections import Counter

    data = tablet_data
    if tablet_data is not None:
        report = validate(tablet_data)
        rows = tablet_rows(report, tablet_data)
        head = [f"tablet file {tablet_name}: {len(tablet_data.finds)} finds checked"]
    else:
        from .settings import ServerSettings

        url = database_url or ServerSettings().database_url
        with ServerStore.open(url, create=False) as store:  # an existing store only: a typo creates nothing
            report, run = run_validation(store)
            rows = list_issues(store, limit=10**9)
            data = store.site_data()
        head = [f"server store: {report.finds_checked} finds checked; {run.new} new issues, {run.resolved} resolved, "
                f"{run.accepted_open} accepted"]
    jpath, cpath = write_report(rows, out)
    bpath = write_brackets(report, data, out)
    sev = Counter(r["severity"] for r in rows)
    open_errors = sum(1 for r in rows if r["severity"] == "error" and not r.get("accepted_by"))
    lines = head + [f"{sev.get('error', 0)} errors ({open_errors} not accepted), {sev.get('warning', 0)} warnings, "
                    f"{sev.get('info', 0)} notes"]
    for code, n in sorted(Counter(r["code"] for r in rows).items()):
        lines.append(f"  {code:<32} {n}")
    for r in [r for r in rows if r["severity"] == "error"][:10]:
        lines.append(f"  - {r['message']}; {r['fix']}")
    lines.append(f"written: {jpath}, {cpath} and {bpath}")
    return {"lines": lines, "open_errors": open_errors, "rows": rows}


def write_brackets(report: Report, data: SiteData, out: Path) -> Path:
    """``age_brackets.json``: each unit's and horizon's age bracket implied by the dated units (ka)."""
    import json

    from schema.strata.dating import horizon_brackets

    units = {u.id: u for u in data.units}
    hb = horizon_brackets(report.brackets, report.matrix, data.horizons)
    doc = {
        "method": "superposition with two-sigma date ranges (see schema/strata/dating.py)",
        "units": {units[u].code: b.as_dict() for u, b in sorted(report.brackets.items(), key=lambda kv: units[kv[0]].code)},
        "horizons": {h.code: hb[h.id].as_dict() for h in sorted(data.horizons, key=lambda h: h.order)},
    }
    path = Path(out) / "age_brackets.json"
    path.write_text(json.dumps(doc, indent=2) + "\n")
    return path
