"""The camp pages for the data manager (and, read-only, the analyst): server-rendered, no front-end build.

Pages: sign in (a device token; or, once, a manager's or analyst's one-time enrolment code, exchanged as
``POST /v1/enrol`` does, with the new token shown once) / out; **Today** (devices and their last push, finds of
the last 24 hours per trench and unit, what waits); **Conflicts** (every open conflict with its competing
values, settled by choosing or typing a value: a new version, exactly as ``POST /v1/conflicts/resolve``);
**Checks** (validation issues filtered by
code, severity, trench, unit; accepted with a reason); **Finds** (search; a find's fields and its history of
versions); **Safety** (every caution the tablets asked about and the answer, by trench, kind and time; possible
human remains first on Today); **Matrix** (the reduced Harris matrix picture); **Exports** (run one and download the zip). Pages are not part of the OpenAPI
schema; they answer a browser, redirecting to the sign-in page when there is no valid session.
"""

from __future__ import annotations

import datetime as dt
import json
import uuid
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs

import sqlalchemy as sa
from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from schema.records import Device, Find, Trench, Unit
from schema.records.safety import KIND_LABELS
from schema.errors import BaulkError, NumberTooFar
from schema.tables import metadata
from schema.withholding import NOTE, withheld

from ..safety import KINDS, safety_log, safety_summary
from ..sync import list_conflicts, resolve_conflict
from ..tables import push_batch
from ..withholding import withheld_for
from .session import COOKIE, LIFETIME_S, PAGE_ROLES, Session, check_csrf, current, end_sessions, make_cookie

router = APIRouter(prefix="/camp", include_in_schema=False)
templates = Jinja2Templates(directory=str(Path(__file__).parent / "templates"))

_EXPLAIN = {
    "concurrent": "Two devices changed this field without seeing each other's change. Choose the value to keep.",
    "void": "One device voided this find while another, not knowing, edited it. Keep the void (true) or restore "
            "the find (false); the edit stays either way.",
    "duplicate_number": "Two finds of the site carry the same number. Give this find a new number (type it).",
}


async def _form(request: Request) -> dict[str, str]:
    body = (await request.body()).decode("utf-8", errors="replace")
    return {k: v[0] for k, v in parse_qs(body, keep_blank_values=True).items()}


def _page(request: Request, name: str, session: Session | None, title: str, status: int = 200, **context: Any) -> Response:
    return templates.TemplateResponse(request, name, {"session": session, "title": title, **context},
                                      status_code=status)


def _signed_in(request: Request) -> Session:
    session = current(request)
    if session is None:
        raise HTTPException(303, headers={"Location": "/camp/sign-in"})
    return session


@router.get("/sign-in", response_class=HTMLResponse)
def sign_in_page(request: Request) -> Response:
    return _page(request, "sign_in.html", None, "Sign in")


@router.post("/sign-in")
async def sign_in(request: Request) -> Response:
    """A device token signs in; a manager's or analyst's one-time enrolment code (or its whole ``baulk-enrol:``
    line) enrols this browser as that device and signs it in, showing the new token once."""
    form = await _form(request)
    if form.get("code", "").strip():
        return _enrol_browser(request, form["code"])
    token = form.get("token", "").strip()
    device = request.app.state.store.device_for_token(token) if token else None
    if device is None or device.role not in PAGE_ROLES:
        why = ("a recorder's token cannot open the camp pages; use a manager or analyst device"
               if device is not None else "this token is unknown or its device was revoked")
        return _page(request, "sign_in.html", None, "Sign in", status=401, message=why, error=True)
    return _with_session(request, RedirectResponse("/camp/", status_code=303), device)


def _with_session(request: Request, response: Response, device: Device) -> Response:
    """The sign-in cookie on ``response``: the same for a token and for an enrolment code."""
    response.set_cookie(COOKIE, make_cookie(request, device), max_age=LIFETIME_S, httponly=True, samesite="strict",
                        secure=request.url.scheme == "https", path="/camp")
    return response


def _enrol_browser(request: Request, text: str) -> Response:
    """Exchange a manager's or analyst's code exactly as ``POST /v1/enrol`` does (same rate limit, same refusals);
    a recorder's code is refused unspent. The token is in this answer only, never stored or sent again."""
    from ..devices import code_from_text, exchange_code

    who = request.client.host if request.client else "unknown"
    if not request.app.state.enrol_limit.allow(who):
        return _page(request, "sign_in.html", None, "Sign in", status=429, error=True,
                     message="too many enrolment attempts from this address; wait a minute and try again")
    store = request.app.state.store
    try:
        enrolled = exchange_code(store, code_from_text(text), roles=PAGE_ROLES)
    except BaulkError as exc:
        return _page(request, "sign_in.html", None, "Sign in", status=401, message=str(exc), error=True)
    device = store.get(Device, uuid.UUID(enrolled["device_id"]))
    response = _page(request, "sign_in.html", None, "Signed in", enrolled=enrolled)
    response.headers["Cache-Control"] = "no-store"  # the token must not be kept by the browser's cache
    return _with_session(request, response, device)


@router.post("/sign-out")
async def sign_out(request: Request) -> Response:
    session = _signed_in(request)
    check_csrf(session, (await _form(request)).get("csrf"))
    end_sessions(request, session.device)  # the cookie is worthless from now on, even where a copy is kept
    response = RedirectResponse("/camp/sign-in", status_code=303)
    response.delete_cookie(COOKIE, path="/camp")
    return response


@router.get("/", response_class=HTMLResponse)
def today(request: Request) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    from schema.sync.tables import open_conflict
    from ..tables import validation_issue as T

    since = dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=24)
    f, u, t = (metadata.tables[n] for n in ("find", "unit", "trench"))
    with store.read() as conn:
        pushes = dict(conn.execute(sa.select(push_batch.c.device, sa.func.max(push_batch.c.received_at))
                                   .group_by(push_batch.c.device)).all())
        new = conn.execute(sa.select(t.c.code, u.c.code, sa.func.count()).select_from(
            f.join(u, f.c.unit_id == u.c.id).join(t, f.c.trench_id == t.c.id))
            .where(f.c.found_at >= since, sa.not_(f.c.voided)).group_by(t.c.code, u.c.code)
            .order_by(t.c.code, u.c.code)).all()
        conflicts = conn.execute(sa.select(sa.func.count()).select_from(open_conflict)).scalar_one()
        errors = conn.execute(sa.select(sa.func.count()).select_from(T).where(
            T.c.open, T.c.severity == "error", T.c.accepted_at.is_(None))).scalar_one()
    devices = [{"label": d.label, "role": d.role, "revoked": d.revoked_at is not None, "enrolled": d.token_hash is not None,
                "last_push": _when(pushes.get(d.id))} for d in store.list(Device, order_by="label")]
    safety = safety_summary(store, since=since)
    from ..backup import backup_status

    return _page(request, "today.html", session, "Today", page="today", devices=devices, conflicts=conflicts,
                 errors=errors, new_finds=[{"trench": a, "unit": b, "finds": n} for a, b, n in new],
                 safety={**safety, "human_remains": [_shown(c) for c in safety["human_remains"]]},
                 kind_labels=KIND_LABELS, backup=backup_status(store))


def _when(t: dt.datetime | None) -> str | None:
    return t.astimezone(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC") if t else None


def _what(store: Any, c: dict[str, Any]) -> str:
    if c["record"] == "find":
        found = store.list(Find, id=uuid.UUID(c["record_id"]))
        name = f"find {found[0].number}" if found else "a find not shown yet"
    else:
        name = f"{c['record']} {c['record_id'][:8]}"
    return f"{name}: {c['field'].removesuffix('_id').replace('_', ' ')}"


@router.get("/conflicts", response_class=HTMLResponse)
def conflicts(request: Request, message: str | None = None) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    units = {str(u.id): u.code for u in store.list(Unit)}
    trenches = {str(t.id): t.code for t in store.list(Trench)}
    with store.read() as conn:  # an analyst: no competing positions of possible human remains
        hidden = withheld_for(conn, session.device.role)
    rows = []
    for c in list_conflicts(store):
        values = [{**v, "value": NOTE} if hidden.field(c["record"], uuid.UUID(v["record_id"]), v["field"]) else v
                  for v in c["values"]]
        rows.append({**c, "what": _what(store, c), "explain": _EXPLAIN.get(c["kind"], ""),
                     "values": [{**v, "json": json.dumps(v["value"]), "at": _when(dt.datetime.fromisoformat(v["at"])),
                                 "shown": units.get(str(v["value"]), trenches.get(str(v["value"]), v["value"]))}
                                for v in values]})
    return _page(request, "conflicts.html", session, "Conflicts", page="conflicts", conflicts=rows,
                 can_resolve=session.device.role == "manager", message=message)


async def _manager_form(request: Request, action: str) -> tuple[Session, dict[str, str]]:
    """A form posted by a signed-in manager with the session's CSRF token; otherwise 303 / 403."""
    session = _signed_in(request)
    form = await _form(request)
    check_csrf(session, form.get("csrf"))
    if session.device.role != "manager":
        raise HTTPException(403, detail=f"only a manager can {action}")
    return session, form


@router.post("/conflicts/resolve")
async def resolve(request: Request) -> Response:
    _session, form = await _manager_form(request, "settle a conflict")
    typed = form.get("typed", "").strip()
    try:
        value = json.loads(typed) if typed else json.loads(form.get("choice", "null"))
    except ValueError:
        value = typed  # typed text that is not JSON is taken as text
    try:
        done = resolve_conflict(request.app.state.store, record=form.get("record", ""),
                                record_id=uuid.UUID(form.get("record_id", "")), field=form.get("field", ""), value=value,
                                confirm_far=form.get("confirm_far") == "yes")
    except NumberTooFar as exc:
        far = exc.confirm_with('tick "the new number is meant to be far above the issued blocks" and settle again')
        return RedirectResponse(f"/camp/conflicts?message={_q(f'not settled: {far}')}", status_code=303)
    except (BaulkError, ValueError) as exc:
        return RedirectResponse(f"/camp/conflicts?message={_q(f'not settled: {exc}')}", status_code=303)
    note = "settled" if not done.get("still_open") else "a new version was written, but a conflict remains"
    return RedirectResponse(f"/camp/conflicts?message={_q(note)}", status_code=303)


def _q(text: str) -> str:
    from urllib.parse import quote

    return quote(text[:600])


# -- checks ---------------------------------------------------------------------------------------------------
@router.get("/checks", response_class=HTMLResponse)
def checks(request: Request, code: str | None = None, severity: str | None = None, trench: str | None = None,
           unit: str | None = None, message: str | None = None) -> Response:
    from ..validation import list_issues

    session = _signed_in(request)
    filters = {"code": code or None, "severity": severity if severity in ("error", "warning", "info") else None,
               "trench": trench or None, "unit": unit or None}
    store = request.app.state.store
    with store.read() as conn:  # an analyst sees a position check on possible human remains without its numbers
        hidden = withheld_for(conn, session.device.role)
    issues = [hidden.issue(i) for i in list_issues(store, **filters)]
    return _page(request, "checks.html", session, "Checks", page="checks", issues=issues,
                 filters={**filters, "any": any(filters.values())}, can_accept=session.device.role == "manager",
                 message=message)


@router.post("/checks/accept")
async def accept(request: Request) -> Response:
    from ..validation import accept_issue

    session, form = await _manager_form(request, "accept a check")
    try:
        accept_issue(request.app.state.store, key=form.get("key", ""), by=session.device.label,
                     reason=form.get("reason", ""))
    except (BaulkError, ValueError) as exc:
        return RedirectResponse(f"/camp/checks?message={_q(f'not accepted: {exc}')}", status_code=303)
    return RedirectResponse(f"/camp/checks?message={_q('accepted')}", status_code=303)


# -- finds ----------------------------------------------------------------------------------------------------
@router.get("/finds", response_class=HTMLResponse)
def finds(request: Request, q: str | None = None) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    units = {u.id: u.code for u in store.list(Unit)}
    trenches = {t.id: t.code for t in store.list(Trench)}
    f = metadata.tables["find"]
    query = sa.select(f.c.id, f.c.number, f.c.trench_id, f.c.unit_id, f.c.category, f.c.material, f.c.voided)
    text = (q or "").strip()
    if text.isdigit():
        query = query.where(f.c.number == int(text))
    elif text:
        unit_ids = [i for i, code in units.items() if code == text]
        query = query.where(sa.or_(f.c.material == text, f.c.unit_id.in_(unit_ids)))
    with store.read() as conn:
        rows = conn.execute(query.order_by(f.c.number).limit(201)).all()
    shown = [{"id": r.id, "number": r.number, "trench": trenches.get(r.trench_id, "?"), "unit": units.get(r.unit_id, "?"),
              "category": r.category, "material": r.material, "voided": r.voided} for r in rows[:200]]
    return _page(request, "finds.html", session, "Finds", page="finds", finds=shown, q=q, more=len(rows) > 200)


@router.get("/finds/{find_id}", response_class=HTMLResponse)
def find(request: Request, find_id: uuid.UUID) -> Response:
    from ..audit import changes

    session = _signed_in(request)
    store = request.app.state.store
    found = store.list(Find, id=find_id)
    if not found:
        raise HTTPException(404, detail="no find has this id here (it may not have synced yet)")
    f = found[0]
    hidden = withheld(session.device.role, [f])  # an analyst: no position of possible human remains
    fields = [(k, NOTE if hidden.field("find", f.id, k) else v) for k, v in f.model_dump(mode="json").items()
              if v not in (None, "", [])]
    history = [{**c, "value": NOTE} if hidden.field("find", f.id, c["field"]) else c
               for c in changes(store, record="find", record_id=find_id, limit=2000)]
    return _page(request, "find.html", session, f"Find {f.number}", page="finds", fields=fields, history=history)


# -- safety ---------------------------------------------------------------------------------------------------
_SPANS = {"1": 1, "7": 7, "30": 30}  # days back the Safety page can show; anything else shows every check


def _shown(check: dict[str, Any]) -> dict[str, Any]:
    return {**check, "at": _when(check["checked_at"]),
            "depth": f"{check['depth_m']:.2f} m" if check["depth_m"] is not None else ""}


@router.get("/safety", response_class=HTMLResponse)
def safety(request: Request, trench: str | None = None, kind: str | None = None, days: str | None = None) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    span = _SPANS.get(days or "")
    since = dt.datetime.now(dt.timezone.utc) - dt.timedelta(days=span) if span else None
    filters = {"trench": trench or None, "kind": kind if kind in KINDS else None}
    rows = [_shown(c) for c in safety_log(store, since=since, limit=1001, **filters)]
    trenches = sorted(t.code for t in store.list(Trench))
    return _page(request, "safety.html", session, "Safety", page="safety", checks=rows[:1000], more=len(rows) > 1000,
                 filters={**filters, "days": days if span else ""}, trenches=trenches, kinds=KIND_LABELS)


# -- matrix and exports ---------------------------------------------------------------------------------------
@router.get("/matrix", response_class=HTMLResponse)
def matrix(request: Request) -> Response:
    return _page(request, "matrix.html", _signed_in(request), "Matrix", page="matrix")


@router.get("/matrix.png")
def matrix_png(request: Request) -> Response:
    import tempfile

    from schema.records import Horizon
    from schema.strata.validate import validate

    from ..export_pictures import draw_matrix

    _signed_in(request)
    store = request.app.state.store
    data = store.site_data()
    report = validate(data)
    problems = {uuid.UUID(i.record_id) for i in report.issues if i.record == "unit" and i.record_id}
    with tempfile.TemporaryDirectory(prefix="baulk-matrix-") as tmp:
        draw_matrix(report.matrix, store.list(Horizon, site_id=data.site.id), problems, Path(tmp))
        png = (Path(tmp) / "harris_matrix.png").read_bytes()
    return Response(png, media_type="image/png")


@router.get("/exports", response_class=HTMLResponse)
def exports(request: Request) -> Response:
    return _page(request, "exports.html", _signed_in(request), "Exports", page="exports")


@router.get("/exports/download")
def exports_download(request: Request, strict: bool = False) -> Response:
    import shutil
    import tempfile

    from fastapi.responses import FileResponse
    from starlette.background import BackgroundTask

    from ..exports import export_zip

    _signed_in(request)
    work = Path(tempfile.mkdtemp(prefix="baulk-export-"))
    archive = export_zip(request.app.state.store, work, strict=strict)

    return FileResponse(archive, media_type="application/zip", filename="baulk-export.zip",
                        background=BackgroundTask(shutil.rmtree, work, True))
