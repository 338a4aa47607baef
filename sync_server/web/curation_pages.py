"""The data manager's curation pages: **Horizons** (the order top to bottom with unit counts and lithostratigraphic
names; add, move up or down, put units in a horizon with a reason; the assignment history), **Dates** (the
laboratory dates; add one, import a CSV by upload), **corrections** of a find (a panel on the existing find page)
or a unit (its own page: fields, relations with Void / Restore and a reason, horizon history, corrections), and **Site** (the site set-up: settings, seasons,
control points with their grid residuals, trenches drawn on a small plan).

Every change calls one function of ``sync_server.curation`` (or nothing); its versioned save counts the change,
so validation re-runs after the answer (``validation.RevalidateAfterAnswer``) without the page asking. Managers write; analysts see the same pages without forms. A refused
form is shown again with the error naming the field, status 400, nothing written. Sessions, CSRF and page
rendering are those of ``pages.py`` (imported, not copied); the find page's correction panel is filled by the
template global ``find_corrections`` registered here on the shared templates.
"""

from __future__ import annotations

import datetime as dt
import tempfile
import uuid
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs

from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from schema.errors import BaulkError, FieldProblem, RecordInvalid, RecordNotFound
from schema.records import Find, Horizon, Trench, Unit

from .. import curation
from . import pages
from .pages import _page, _q, _signed_in, templates
from .session import Session, check_csrf, current

__all__ = ["ROUTE_ROLES", "router"]

router = APIRouter(prefix="/camp", include_in_schema=False)

# who may open each route (joined into sync_server.app.ROUTE_ROLES)
ROUTE_ROLES: dict[str, str] = {
    "GET /camp/horizons": "page: manager, analyst",
    "POST /camp/horizons/add": "page: manager",
    "POST /camp/horizons/move": "page: manager",
    "POST /camp/horizons/assign": "page: manager",
    "GET /camp/dates": "page: manager, analyst",
    "POST /camp/dates/add": "page: manager",
    "POST /camp/dates/import": "page: manager",
    "POST /camp/finds/{find_id}/correct": "page: manager",
    "GET /camp/units/{unit_id}": "page: manager, analyst",
    "POST /camp/units/{unit_id}/correct": "page: manager",
    "POST /camp/relations/{relation_id}/void": "page: manager",
    "POST /camp/relations/{relation_id}/restore": "page: manager",
    "GET /camp/site": "page: manager, analyst",
}


def _stamp(request: Request, t: dt.datetime | None) -> str:
    """A time in the site's zone, to the minute (as on every camp page); the zone is read once a request."""
    if not hasattr(request.state, "site_zone"):
        request.state.site_zone = pages.site_zone(request.app.state.store)
    return pages._when(t, request.state.site_zone) or ""


async def _fields(request: Request) -> tuple[dict[str, str], dict[str, tuple[str, bytes]]]:
    """A posted form's fields and uploaded files (url-encoded or multipart; multipart read with the standard
    library's MIME parser, the body already bounded by the server's size limit)."""
    body = await request.body()
    kind = request.headers.get("content-type", "")
    if not kind.lower().startswith("multipart/form-data"):
        text = body.decode("utf-8", errors="replace")
        return {k: v[0] for k, v in parse_qs(text, keep_blank_values=True).items()}, {}
    from email.parser import BytesParser
    from email.policy import HTTP

    message = BytesParser(policy=HTTP).parsebytes(b"Content-Type: " + kind.encode("latin-1") + b"\r\n\r\n" + body)
    fields: dict[str, str] = {}
    files: dict[str, tuple[str, bytes]] = {}
    for part in message.iter_parts():  # type: ignore[attr-defined]
        name = part.get_param("name", header="content-disposition")
        payload = part.get_payload(decode=True) or b""
        if not name:
            continue
        if part.get_filename() is not None:
            files[str(name)] = (str(part.get_filename()), payload)
        else:
            fields[str(name)] = payload.decode("utf-8", errors="replace")
    return fields, files


async def _manager_post(request: Request, action: str) -> tuple[Session, dict[str, str], dict[str, tuple[str, bytes]]]:
    """A form from a signed-in manager carrying the session's CSRF token; otherwise 303 (no session) or 403."""
    session = _signed_in(request)
    fields, files = await _fields(request)
    check_csrf(session, fields.get("csrf"))
    if session.device.role != "manager":
        raise HTTPException(403, detail=f"only a manager can {action}")
    return session, fields, files


def _done(request: Request, where: str, note: str) -> Response:
    """Back to the page with what was written; validation runs again once the answer is sent (the write counted
    as a change: ``validation.RevalidateAfterAnswer``)."""
    return RedirectResponse(f"{where}?message={_q(note)}", status_code=303)


def _optional_int(name: str, text: str, fix: str) -> int | None:
    text = text.strip()
    if not text:
        return None
    if not text.isdigit():
        raise RecordInvalid("form", [FieldProblem(name, f"{text!r} is not a whole number", fix)])
    return int(text)


def _number(name: str, text: str) -> float:
    try:
        return float(text.strip().replace(",", "."))
    except ValueError:
        raise RecordInvalid("date", [FieldProblem(name, f"{text.strip()!r} is not a number",
                                                  "type digits, with a point for decimals, e.g. 12.5")]) from None


def _refused(exc: BaulkError) -> list[str]:
    """The fields an error names (to mark them on the form)."""
    return [p.field for p in exc.problems] if isinstance(exc, RecordInvalid) else []


# -- horizons -------------------------------------------------------------------------------------------------
def _horizons_page(request: Request, session: Session, *, status: int = 200, message: str | None = None,
                   error: bool = False, form: dict[str, str] | None = None, which: str = "") -> Response:
    store = request.app.state.store
    try:
        horizons = curation.list_horizons(store)
        loose = curation.units_without_horizon(store)
        history = curation.assignment_history(store, limit=200)
        from ..export_ages import page_ages

        ages = page_ages(store.site_data())  # the horizons' modelled ages (the Ages section)
    except RecordNotFound as exc:
        horizons, loose, history, ages = [], [], [], None
        message, error = message or str(exc), True
    return _page(request, "horizons.html", session, "Horizons", status=status, page="horizons", horizons=horizons,
                 loose=loose, history=[{**h, "at": _stamp(request, h["at"])} for h in history], ages=ages,
                 can_write=session.device.role == "manager", message=message, error=error, form=form or {},
                 which=which)


@router.get("/horizons", response_class=HTMLResponse)
def horizons(request: Request, message: str | None = None) -> Response:
    return _horizons_page(request, _signed_in(request), message=message)


@router.post("/horizons/add")
async def horizons_add(request: Request) -> Response:
    session, form, _ = await _manager_post(request, "add a horizon")
    try:
        order = _optional_int("order", form.get("order", ""), "give the position from the top (1 = uppermost), or "
                                                               "leave it empty to add the horizon at the bottom")
        h = curation.add_horizon(request.app.state.store, code=form.get("code", ""), label=form.get("label", ""),
                                 order=order, formation=form.get("formation"), member=form.get("member"),
                                 bed=form.get("bed"))
    except BaulkError as exc:
        return _horizons_page(request, session, status=400, message=f"Horizon not added: {exc}", error=True,
                              form=form, which="add")
    return _done(request, "/camp/horizons", f"horizon {h.code} added at order {h.order}")


@router.post("/horizons/move")
async def horizons_move(request: Request) -> Response:
    session, form, _ = await _manager_post(request, "reorder the horizons")
    store = request.app.state.store
    code, step = form.get("code", ""), -1 if form.get("direction") == "up" else 1
    try:
        codes = [h["code"] for h in curation.list_horizons(store)]
        if code not in codes:
            raise RecordNotFound(f"no horizon {code!r} here; reload the page")
        i = codes.index(code)
        j = max(0, min(len(codes) - 1, i + step))
        codes[i], codes[j] = codes[j], codes[i]
        curation.reorder_horizons(store, codes)
    except BaulkError as exc:
        return _horizons_page(request, session, status=400, message=f"Order not changed: {exc}", error=True)
    return _done(request, "/camp/horizons", f"horizons top to bottom: {', '.join(codes)}")


@router.post("/horizons/assign")
async def horizons_assign(request: Request) -> Response:
    session, form, _ = await _manager_post(request, "put units in a horizon")
    target = form.get("horizon", "")
    units = form.get("units", "").replace(",", " ").split()
    try:
        a = curation.assign_units(request.app.state.store, horizon=target or None, units=units,
                                  reason=form.get("reason", ""), by=form.get("by", "").strip())
    except BaulkError as exc:
        return _horizons_page(request, session, status=400, message=f"Units not assigned: {exc}", error=True,
                              form=form, which="assign")
    where = f"horizon {a.horizon}" if a.horizon else "no horizon"
    return _done(request, "/camp/horizons", f"{', '.join(a.moved)} now in {where}")


# -- dates ----------------------------------------------------------------------------------------------------
def _dates_page(request: Request, session: Session, *, status: int = 200, message: str | None = None,
                error: bool = False, form: dict[str, str] | None = None, which: str = "") -> Response:
    store = request.app.state.store
    try:
        dates = curation.list_dates(store)
        units = [u["code"] for h in curation.list_horizons(store) for u in h["units"]] + \
                [u["code"] for u in curation.units_without_horizon(store)]
    except RecordNotFound as exc:
        dates, units = [], []
        message, error = message or str(exc), True
    return _page(request, "dates.html", session, "Dates", status=status, page="dates", dates=dates,
                 units=sorted(units), methods=curation.METHODS, columns=curation.DATE_COLUMNS,
                 can_write=session.device.role == "manager", message=message, error=error, form=form or {},
                 which=which)


@router.get("/dates", response_class=HTMLResponse)
def dates(request: Request, message: str | None = None) -> Response:
    return _dates_page(request, _signed_in(request), message=message)


@router.post("/dates/add")
async def dates_add(request: Request) -> Response:
    session, form, _ = await _manager_post(request, "add a date")
    try:
        d = curation.add_date(request.app.state.store, unit=form.get("unit", ""), method=form.get("method", ""),
                              age_ka=_number("age_ka", form.get("age_ka", "")),
                              sigma_ka=_number("sigma_ka", form.get("sigma_ka", "")),
                              lab_code=form.get("lab_code"), sample_find_number=form.get("sample_find_number"),
                              note=form.get("note", ""))
    except BaulkError as exc:
        return _dates_page(request, session, status=400, message=f"Date not added: {exc}", error=True, form=form,
                           which="add")
    return _done(request, "/camp/dates", f"date added: {d.method} {d.age_ka:g} ± {d.sigma_ka:g} ka "
                                         f"on unit {form.get('unit', '').strip()}")


@router.post("/dates/import")
async def dates_import(request: Request) -> Response:
    session, _form, files = await _manager_post(request, "import dates")
    name, content = files.get("file", ("", b""))
    shown = Path(name.replace("\\", "/")).name or "the uploaded file"
    try:
        if not content:
            raise RecordInvalid("import", [FieldProblem("file", "no file was chosen (or it is empty)",
                                                        "choose the laboratory's CSV file, then import")])
        with tempfile.TemporaryDirectory(prefix="baulk-dates-") as tmp:
            path = Path(tmp) / "upload.csv"
            path.write_bytes(content)
            r = curation.import_dates_csv(request.app.state.store, path, name=shown)
    except BaulkError as exc:
        return _dates_page(request, session, status=400, message=f"Nothing imported: {exc}", error=True,
                           which="import")
    skipped = f", {len(r.skipped)} already held (skipped)" if r.skipped else ""
    return _done(request, "/camp/dates", f"imported {shown}: {len(r.added)} dates added{skipped}")


# -- corrections ----------------------------------------------------------------------------------------------
def _panel(request: Request, session: Session, record: str, record_id: uuid.UUID, action: str, *,
           form: dict[str, str] | None = None, error: str | None = None) -> dict[str, Any]:
    """What the correction panel shows: the corrections made, and (for a manager) the form."""
    rows = curation.corrections(request.app.state.store, record=record, record_id=record_id)
    return {"rows": [{**r, "at": _stamp(request, r["at"])} for r in rows], "fields": curation.correctable_fields(record),
            "can_correct": session.device.role == "manager", "action": action, "form": form or {}, "error": error,
            "done": request.query_params.get("corrected"), "record": record}


def _find_panel(request: Request) -> dict[str, Any] | None:
    """The correction panel of the find page being rendered (a template global; None without a session)."""
    session = current(request)
    raw = request.path_params.get("find_id")
    if session is None or raw is None:
        return None
    return _panel(request, session, "find", uuid.UUID(str(raw)), f"/camp/finds/{raw}/correct")


templates.env.globals["find_corrections"] = _find_panel


def _uuid(text: str, what: str) -> uuid.UUID:
    try:
        return uuid.UUID(text)
    except ValueError:
        raise HTTPException(404, detail=f"no {what} has id {text!r} here") from None


def _correct(request: Request, session: Session, record: str, key: str, form: dict[str, str]) -> Any:
    if not form.get("field", "").strip():
        raise RecordInvalid(f"{record} {key}", [FieldProblem("field", "no field was chosen",
                                                             "choose the field to correct, then type its new value")])
    return curation.correct_record(request.app.state.store, record=record, key=key,
                                   changes={form.get("field", ""): form.get("value", "")},
                                   reason=form.get("reason", ""), by=session.device.label)


def _summary(done: Any) -> str:
    return "; ".join(f"{f} {was} -> {now}" for f, was, now in done.changes)


@router.post("/finds/{find_id}/correct")
async def find_correct(request: Request, find_id: str) -> Response:
    session, form, _ = await _manager_post(request, "correct a find")
    fid = _uuid(find_id, "find")
    found = request.app.state.store.list(Find, id=fid)
    if not found:
        raise HTTPException(404, detail="no find has this id here (it may not have synced yet)")
    try:
        done = _correct(request, session, "find", str(found[0].number), form)
    except BaulkError as exc:
        page = pages.find(request, fid)
        context = {**page.context, "message": f"Find not corrected: {exc}", "error": True,  # type: ignore[attr-defined]
                   "panel": _panel(request, session, "find", fid, f"/camp/finds/{fid}/correct", form=form,
                                   error=str(exc))}
        return templates.TemplateResponse(request, "find.html", context, status_code=400)
    return RedirectResponse(f"/camp/finds/{fid}?corrected={_q(_summary(done))}", status_code=303)


def _unit_page(request: Request, session: Session, unit_id: str, *, status: int = 200,
               form: dict[str, str] | None = None, error: str | None = None,
               relation_error: tuple[str, str, dict[str, str]] | None = None) -> Response:
    """The unit page; ``error`` is a refused correction, ``relation_error`` a refused void or restore (relation
    id, message, the form as sent), shown beside that relation."""
    store = request.app.state.store
    found = store.list(Unit, id=_uuid(unit_id, "unit"))
    if not found:
        raise HTTPException(404, detail="no unit has this id here (it may not have synced yet)")
    u = found[0]
    trench = {t.id: t.code for t in store.list(Trench, id=u.trench_id)}
    horizon = {h.id: h.code for h in store.list(Horizon, site_id=u.site_id)}
    shown = {"trench": trench.get(u.trench_id, "?"), "horizon": horizon.get(u.horizon_id) if u.horizon_id else None,
             **u.model_dump(mode="json", exclude={"id", "site_id", "trench_id", "horizon_id"})}
    fields = [(pages.field_label(k), pages.words(v) if k in ("kind", "texture", "status") else v)
              for k, v in shown.items() if v not in (None, "")]
    history = curation.assignment_history(store, unit=u.code, limit=None)
    panel = _panel(request, session, "unit", u.id, f"/camp/units/{u.id}/correct", form=form, error=error)
    relations = curation.unit_relations(store, unit_id=u.id)
    message = f"Unit not corrected: {error}" if error else request.query_params.get("message")
    return _page(request, "unit.html", session, f"Unit {u.code}", status=status, page="horizons", unit=u,
                 fields=fields, history=[{**h, "at": _stamp(request, h["at"])} for h in history], panel=panel,
                 relations=relations, relation_error=relation_error, can_write=session.device.role == "manager",
                 message=message, error=bool(error))


@router.get("/units/{unit_id}", response_class=HTMLResponse)
def unit(request: Request, unit_id: str) -> Response:
    return _unit_page(request, _signed_in(request), unit_id)


@router.post("/units/{unit_id}/correct")
async def unit_correct(request: Request, unit_id: str) -> Response:
    session, form, _ = await _manager_post(request, "correct a unit")
    found = request.app.state.store.list(Unit, id=_uuid(unit_id, "unit"))
    if not found:
        raise HTTPException(404, detail="no unit has this id here (it may not have synced yet)")
    try:
        done = _correct(request, session, "unit", found[0].code, form)
    except BaulkError as exc:
        return _unit_page(request, session, unit_id, status=400, form=form, error=str(exc))
    return RedirectResponse(f"/camp/units/{found[0].id}?corrected={_q(_summary(done))}", status_code=303)


async def _relation_change(request: Request, relation_id: str, void: bool) -> Response:
    verb = "void" if void else "restore"
    session, form, _ = await _manager_post(request, f"{verb} a relation")
    rid = _uuid(relation_id, "relation")
    back = form.get("unit", "")
    act = curation.void_relation if void else curation.restore_relation
    try:
        done = act(request.app.state.store, relation_id=rid, reason=form.get("reason", ""),
                   by=form.get("by", "").strip() or session.device.label)
    except BaulkError as exc:
        if not back:
            raise HTTPException(400, detail=str(exc)) from None
        return _unit_page(request, session, back, status=400, relation_error=(str(rid), str(exc), form))
    state = "voided: it no longer counts in the matrix" if void else "restored: it counts in the matrix again"
    note = f"relation {done.label} {state}. Why: {done.reason}"
    return _done(request, f"/camp/units/{_uuid(back, 'unit')}" if back else "/camp/matrix", note)


@router.post("/relations/{relation_id}/void")
async def relation_void(request: Request, relation_id: str) -> Response:
    return await _relation_change(request, relation_id, True)


@router.post("/relations/{relation_id}/restore")
async def relation_restore(request: Request, relation_id: str) -> Response:
    return await _relation_change(request, relation_id, False)


# -- site -----------------------------------------------------------------------------------------------------
def _plan(summary: dict[str, Any]) -> dict[str, Any] | None:
    """The trenches and control points as SVG shapes in a view box over their extent (north up)."""
    rings = [t["outline"] for t in summary["trenches"]]
    points = [(c["e"], c["n"]) for c in summary["control_points"]]
    xs = [p[0] for r in rings for p in r] + [p[0] for p in points]
    ys = [p[1] for r in rings for p in r] + [p[1] for p in points]
    if not xs:
        return None
    pad = max(max(xs) - min(xs), max(ys) - min(ys), 1.0) * 0.08
    x0, y1 = min(xs) - pad, max(ys) + pad
    w, h = max(xs) + pad - x0, y1 - (min(ys) - pad)

    def xy(e: float, n: float) -> str:
        return f"{e - x0:.3f},{y1 - n:.3f}"

    def centre(ring: list[list[float]]) -> tuple[float, float]:
        return sum(p[0] for p in ring) / len(ring), sum(p[1] for p in ring) / len(ring)

    return {"width": f"{w:.3f}", "height": f"{h:.3f}", "font": f"{max(w, h) / 30:.3f}", "dot": f"{max(w, h) / 120:.3f}",
            "trenches": [{"code": t["code"], "points": " ".join(xy(e, n) for e, n in t["outline"]),
                          "label": xy(*centre(t["outline"])).split(",")} for t in summary["trenches"]],
            "points": [{"code": c["code"], "at": xy(c["e"], c["n"]).split(",")} for c in summary["control_points"]]}


@router.get("/site", response_class=HTMLResponse)
def site(request: Request) -> Response:
    from ..site_setup import site_summary

    session = _signed_in(request)
    try:
        summary = site_summary(request.app.state.store)
    except RecordNotFound as exc:
        return _page(request, "site.html", session, "Site", page="site", summary=None, message=str(exc), error=True)
    return _page(request, "site.html", session, f"Site {summary['site'].code}", page="site", summary=summary,
                 plan=_plan(summary))
