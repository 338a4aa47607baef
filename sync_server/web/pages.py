"""The camp pages for the data manager (and, read-only, the analyst): server-rendered, no front-end build.

Pages: sign in (a device token; or, once, a manager's or analyst's one-time enrolment code, exchanged as
``POST /v1/enrol`` does, with the new token shown once) / out; **Today** (devices and their last push, finds of
the last 24 hours per trench and unit, what waits); **Conflicts** (every open conflict with its competing
values, settled by choosing or typing a value: a new version, exactly as ``POST /v1/conflicts/resolve``);
**Checks** (validation issues filtered by
code, severity, trench, unit; accepted with a reason); **Finds** (search, paged newest first; a find as a
record by label and code, its history of versions below); **Safety** (every caution the tablets asked about and the answer, by trench, kind and time; possible
human remains first on Today); **Matrix** (the reduced Harris matrix
drawn inline as SVG text, outlined where Checks has open checks); **Exports** (run one and download the zip). Pages are not part of the OpenAPI
schema; they answer a browser, redirecting to the sign-in page when there is no valid session. Records are
named by their codes and times shown in the site's time zone, to the minute (``record_name``, ``_when``).
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

from schema.records import Device, Find, Season, Site, Spit, Trench, Unit
from schema.records.safety import KIND_LABELS
from schema.errors import BaulkError, NumberTooFar
from schema.tables import metadata
from schema.withholding import NOTE, withheld

from ..safety import KINDS, safety_log, safety_summary
from ..sync import count_conflicts, list_conflicts, resolve_conflict
from ..tables import push_batch
from ..withholding import withheld_for
from .session import COOKIE, LIFETIME_S, PAGE_ROLES, Session, check_csrf, current, end_sessions, make_cookie

router = APIRouter(prefix="/camp", include_in_schema=False)
templates = Jinja2Templates(directory=str(Path(__file__).parent / "templates"))

_EXPLAIN = {
    "concurrent": "Two devices changed this field without seeing each other's change. Choose the value to keep.",
    "void": "One device voided this find while another, not knowing, edited it. Keep the void (yes) or restore "
            "the find (no); the edit stays either way.",
    "duplicate_number": "Finds of the site carry the same number. Give one of them a new number (type it beside "
                        "that find); the others keep theirs.",
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
        conflicts = count_conflicts(conn)  # a number clash once, as GET /v1/conflicts counts it (issue 16)
        errors = conn.execute(sa.select(sa.func.count()).select_from(T).where(
            T.c.open, T.c.severity == "error", T.c.accepted_at.is_(None))).scalar_one()
    zone = site_zone(store)
    devices = [{"label": d.label, "role": d.role, "revoked": d.revoked_at is not None, "enrolled": d.token_hash is not None,
                "last_push": _when(pushes.get(d.id), zone)} for d in store.list(Device, order_by="label")]
    safety = safety_summary(store, since=since)
    from ..backup import backup_status

    return _page(request, "today.html", session, "Today", page="today", devices=devices, conflicts=conflicts,
                 errors=errors, new_finds=[{"trench": a, "unit": b, "finds": n} for a, b, n in new],
                 safety={**safety, "human_remains": [_shown(c, zone) for c in safety["human_remains"]]},
                 kind_labels=KIND_LABELS, backup=backup_status(store))


def site_zone(store: Any) -> dt.tzinfo:
    """The site's time zone (its IANA name on the Site record); UTC before a site is set up."""
    import zoneinfo

    sites = store.list(Site, order_by="code")
    try:
        return zoneinfo.ZoneInfo(sites[0].timezone) if sites else dt.timezone.utc
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        return dt.timezone.utc


def _when(t: dt.datetime | str | None, zone: dt.tzinfo = dt.timezone.utc) -> str | None:
    """A time as people at the site read it: its date and minute in the site's zone, with the zone's short name
    ("2026-07-03 09:30 EAT"); no seconds, no microseconds. A naive time is taken as UTC (how the stores keep it)."""
    if t is None or t == "":
        return None
    if isinstance(t, str):
        t = dt.datetime.fromisoformat(t)
    local = (t if t.tzinfo else t.replace(tzinfo=dt.timezone.utc)).astimezone(zone)
    return f"{local:%Y-%m-%d %H:%M} {local.tzname()}"


def record_name(store: Any, record: str, record_id: str | uuid.UUID) -> str:
    """A record as the people at the site call it: ``find 143``, ``unit 101``, ``relation 101 above 102``,
    ``spit 2 of unit 101``; never an id. A record not synced here yet is named by its kind alone."""
    from schema.records import REGISTRY

    spec = REGISTRY.get(record)
    kind = record.replace("_", " ")
    try:
        found = store.list(spec.model, id=uuid.UUID(str(record_id))) if spec else []
    except ValueError:
        found = []
    if not found:
        return f"a {kind} not synced here yet"
    r = found[0]

    def unit(uid: uuid.UUID) -> str:
        units = store.list(Unit, id=uid)
        return units[0].code if units else "?"

    if record == "find":
        return f"find {r.number}"
    if record == "relation":
        return f"relation {unit(r.upper_unit_id)} {words(r.kind)} {unit(r.lower_unit_id)}"
    if record == "spit":
        return f"spit {r.number} of unit {unit(r.unit_id)}"
    if record == "level_point":
        return f"a {r.surface} level of unit {unit(r.unit_id)}"
    for attr in ("code", "label", "lab_code"):
        if getattr(r, attr, None):
            return f"{kind} {getattr(r, attr)}"
    return f"a {kind}"


def words(value: Any) -> str:
    """A vocabulary value or field name in words (``other_stone`` -> ``other stone``)."""
    return str(value).replace("_", " ")


def _what(store: Any, c: dict[str, Any]) -> str:
    name = record_name(store, c["record"], c["record_id"])
    return f"{name}: {field_label(c['field']).lower()}"


# how a field is named on the pages where its name alone would not say it (others: the name in words)
_LABELS = {"e": "E (m)", "n": "N (m)", "z": "Z (m)", "weight_g": "Weight (g)", "length_mm": "Length (mm)",
           "width_mm": "Width (mm)", "thickness_mm": "Thickness (mm)", "bearing_deg": "Bearing (grid degrees)",
           "plunge_deg": "Plunge (degrees)", "position_sigma_m": "Position uncertainty, 1 sigma (m)",
           "position_source": "Position from", "found_at": "Found at", "human_remains": "Possible human remains",
           "void_reason": "Why voided", "label_printed_at": "Label printed", "photo_hashes": "Photos",
           "unit_id": "Unit", "trench_id": "Trench", "season_id": "Season", "spit_id": "Spit", "site_id": "Site",
           "device_id": "Numbered on", "shot_id": "Total station shot", "gnss_fix_id": "GNSS reading",
           "bucket": "Sieve bucket", "munsell": "Munsell colour", "munsell_condition": "Munsell read",
           "opened_on": "Opened", "closed_on": "Closed"}


def field_label(name: str) -> str:
    """A record field's label on the camp pages (``weight_g`` -> ``Weight (g)``)."""
    return _LABELS.get(name) or words(name.removesuffix("_id")).capitalize()


templates.env.globals["field_label"] = field_label
templates.env.filters["field_label_filter"] = field_label


@router.get("/conflicts", response_class=HTMLResponse)
def conflicts(request: Request, message: str | None = None) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    show = _Shown(store)
    with store.read() as conn:  # an analyst: no competing positions of possible human remains
        hidden = withheld_for(conn, session.device.role)
    rows = []
    for c in list_conflicts(store):
        values = [{**v, "value": NOTE, "withheld": True} if hidden.field(c["record"], uuid.UUID(v["record_id"]), v["field"])
                  else v for v in c["values"]]
        rows.append({**c, "what": _what(store, c), "explain": _EXPLAIN.get(c["kind"], ""),
                     "values": [{**v, "json": json.dumps(v["value"]), "at": _when(v["at"], show.zone),
                                 "shown": v["value"] if v.get("withheld") else show(c["field"], v["value"]),
                                 "name": record_name(store, c["record"], v["record_id"]),
                                 "detail": _find_detail(store, v["record_id"]) if c["kind"] == "duplicate_number" else ""}
                                for v in values]})
    return _page(request, "conflicts.html", session, "Conflicts", page="conflicts", conflicts=rows,
                 can_resolve=session.device.role == "manager", message=message)


def _find_detail(store: Any, find_id: str) -> str:
    """What tells apart finds sharing a number: material and unit (``obsidian, unit 101``)."""
    found = store.list(Find, id=uuid.UUID(find_id))
    if not found:
        return ""
    units = store.list(Unit, id=found[0].unit_id)
    return ", ".join(x for x in (words(found[0].material), f"unit {units[0].code}" if units else None) if x)


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
    issues.sort(key=lambda i: i["accepted_at"] is not None)  # what still needs a look first; accepted ones after
    accepted = sum(1 for i in issues if i["accepted_at"] is not None)
    return _page(request, "checks.html", session, "Checks", page="checks", issues=issues,
                 open_count=len(issues) - accepted, accepted_count=accepted,
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
FINDS_PER_PAGE = 50


@router.get("/finds", response_class=HTMLResponse)
def finds(request: Request, q: str | None = None, page: int = 1) -> Response:
    """The finds, newest first (by when they were found, then by number), a page at a time."""
    session = _signed_in(request)
    store = request.app.state.store
    units = {u.id: u.code for u in store.list(Unit)}
    trenches = {t.id: t.code for t in store.list(Trench)}
    zone = site_zone(store)
    f = metadata.tables["find"]
    where: list[Any] = []
    text = (q or "").strip()
    if text.isdigit():
        where.append(f.c.number == int(text))
    elif text:
        unit_ids = [i for i, code in units.items() if code == text]
        where.append(sa.or_(f.c.material == text.replace(" ", "_"), f.c.unit_id.in_(unit_ids)))
    with store.read() as conn:
        total = conn.execute(sa.select(sa.func.count()).select_from(f).where(*where)).scalar_one()
        pages = max(1, -(-total // FINDS_PER_PAGE))
        page = min(max(1, page), pages)
        rows = conn.execute(sa.select(f.c.id, f.c.number, f.c.trench_id, f.c.unit_id, f.c.category, f.c.material,
                                      f.c.found_at, f.c.voided).where(*where)
                            .order_by(f.c.found_at.desc(), f.c.number.desc())
                            .limit(FINDS_PER_PAGE).offset((page - 1) * FINDS_PER_PAGE)).all()
    shown = [{"id": r.id, "number": r.number, "trench": trenches.get(r.trench_id, "?"), "unit": units.get(r.unit_id, "?"),
              "category": words(r.category), "material": words(r.material), "voided": r.voided,
              "found": _when(r.found_at, zone)} for r in rows]
    first = (page - 1) * FINDS_PER_PAGE + 1
    return _page(request, "finds.html", session, "Finds", page="finds", finds=shown, q=q or "", total=total,
                 first=first, last=first + len(shown) - 1, number=page, pages=pages)


_FIND_GROUPS = (  # the find page, read top to bottom as a record card: what it is, where, who and when, state
    ("What", ("category", "material", "taxon", "element", "count", "weight_g", "length_mm", "width_mm",
              "thickness_mm", "bearing_deg", "plunge_deg", "notes", "photo_hashes")),
    ("Where", ("trench_id", "unit_id", "spit_id", "recovery", "bucket", "e", "n", "z", "position_source",
               "position_sigma_m", "human_remains")),
    ("Who and when", ("found_at", "recorder", "device_id", "season_id", "label_printed_at")),
    ("State", ("voided", "void_reason")),
)


class _Shown:
    """Record values in the user's terms: codes for ids, words for vocabulary, site-zone times, yes or no."""

    def __init__(self, store: Any) -> None:
        self.zone = site_zone(store)
        self.names: dict[str, dict[Any, str]] = {
            "unit_id": {str(u.id): u.code for u in store.list(Unit)},
            "trench_id": {str(t.id): t.code for t in store.list(Trench)},
            "season_id": {str(s.id): s.label for s in store.list(Season)},
            "spit_id": {str(s.id): f"spit {s.number}" for s in store.list(Spit)},
            "device_id": {str(d.id): d.label for d in store.list(Device)},
        }

    def __call__(self, name: str, value: Any) -> str:
        if value is None or value == "" or value == []:
            return "none"
        if name in self.names:
            return self.names[name].get(str(value), "not synced here yet")
        if name in ("shot_id", "gnss_fix_id"):
            return "kept (raw observation)"
        if name == "photo_hashes":
            return f"{len(value)} photo{'s' if len(value) != 1 else ''}"
        if isinstance(value, bool):
            return "yes" if value else "no"
        if name.endswith("_at"):
            return _when(value, self.zone) or "none"
        if isinstance(value, float):
            return f"{value:.3f}" if name in ("e", "n", "z", "position_sigma_m") else f"{value:g}"
        return words(value) if name in ("category", "material", "recovery", "position_source") else str(value)


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
    show = _Shown(store)
    data = f.model_dump(mode="json")
    groups = []
    for title, names in _FIND_GROUPS:
        rows = [(field_label(k), NOTE if hidden.field("find", f.id, k) else show(k, data[k])) for k in names
                if data.get(k) not in (None, "", []) and not (k == "voided" and not data[k])]
        if rows:
            groups.append((title, rows))
    history: list[dict[str, Any]] = []  # one entry per device and minute: what it wrote then, newest first
    for c in changes(store, record="find", record_id=find_id, limit=2000):
        if c["field"] in ("id", "site_id"):
            continue
        at = _when(c["at"], show.zone)
        if not history or (history[-1]["at"], history[-1]["device"]) != (at, c["device"]):
            history.append({"at": at, "device": c["device"], "changes": []})
        history[-1]["changes"].append((field_label(c["field"]), NOTE if hidden.field("find", f.id, c["field"])
                                       else show(c["field"], c["value"])))
    history.reverse()
    return _page(request, "find.html", session, f"Find {f.number}", page="finds", find=f, groups=groups,
                 history=history, unit_code=show.names["unit_id"].get(str(f.unit_id), "?"),
                 trench_code=show.names["trench_id"].get(str(f.trench_id), "?"))


# -- safety ---------------------------------------------------------------------------------------------------
_SPANS = {"1": 1, "7": 7, "30": 30}  # days back the Safety page can show; anything else shows every check


def _shown(check: dict[str, Any], zone: dt.tzinfo) -> dict[str, Any]:
    return {**check, "at": _when(check["checked_at"], zone),
            "depth": f"{check['depth_m']:.2f} m" if check["depth_m"] is not None else ""}


@router.get("/safety", response_class=HTMLResponse)
def safety(request: Request, trench: str | None = None, kind: str | None = None, days: str | None = None) -> Response:
    session = _signed_in(request)
    store = request.app.state.store
    span = _SPANS.get(days or "")
    since = dt.datetime.now(dt.timezone.utc) - dt.timedelta(days=span) if span else None
    filters = {"trench": trench or None, "kind": kind if kind in KINDS else None}
    zone = site_zone(store)
    rows = [_shown(c, zone) for c in safety_log(store, since=since, limit=1001, **filters)]
    trenches = sorted(t.code for t in store.list(Trench))
    return _page(request, "safety.html", session, "Safety", page="safety", checks=rows[:1000], more=len(rows) > 1000,
                 filters={**filters, "days": days if span else ""}, trenches=trenches, kinds=KIND_LABELS)


# -- matrix and exports ---------------------------------------------------------------------------------------
def flagged_units(store: Any) -> dict[uuid.UUID, int]:
    """Units the Checks page names with an open check not accepted (on the unit itself, on one of its finds or
    on one of its relations) and how many: the matrix outlines exactly these, so picture and page agree."""
    from schema.records import Relation

    from ..validation import list_issues

    by_code = {u.code: u.id for u in store.list(Unit)}
    relations = {str(r.id): r for r in store.list(Relation)}
    counts: dict[uuid.UUID, int] = {}
    for i in list_issues(store, include_accepted=False, limit=100_000):
        named = {by_code[i["unit"]]} if i["unit"] in by_code else set()
        if i["record"] == "relation" and i["record_id"] in relations:
            r = relations[i["record_id"]]
            named |= {r.upper_unit_id, r.lower_unit_id}
        for u in named:
            counts[u] = counts.get(u, 0) + 1
    return counts


_BOX_H, _ROW, _GAP, _CHAR, _FONT = 40, 84, 28, 10, 17  # px: box height, row pitch, gap, width per character, type


def matrix_picture(matrix: Any, horizons: list[Any], flagged: dict[uuid.UUID, int]) -> dict[str, Any]:
    """The reduced matrix as plain drawing data for an SVG at its natural size (text stays readable; a narrow
    screen scrolls it): boxes with their text, fill, outline and link, and the lines between them. The layout is
    the exported picture's (``export_pictures.matrix_layout``), so both drawings agree."""
    from ..export_pictures import NO_HORIZON, PALETTE, box_fill, matrix_layout

    colour = {h.id: PALETTE[i % len(PALETTE)] for i, h in enumerate(sorted(horizons, key=lambda h: h.order))}
    layout = matrix_layout(matrix, {h.id: h.order for h in horizons})
    text = {k: " / ".join(matrix.label(g) for g in k) for k in layout.at}
    pitch = max([_CHAR * len(t) + 24 for t in text.values()] + [90]) + _GAP
    xs = [x for x, _r in layout.at.values()] or [0.0]
    left = min(xs)
    boxes = {}
    for k, (x, r) in layout.at.items():
        units = [matrix.units[u] for g in k for u in matrix.members[g]]
        checks = sum(flagged.get(u.id, 0) for u in units)
        width = _CHAR * len(text[k]) + 24 + (_CHAR * 3 if checks else 0)
        cx = _GAP / 2 + (x - left) * pitch + pitch / 2
        cycle = len(k) > 1
        boxes[k] = {"x": cx - width / 2, "y": 20 + r * _ROW, "w": width, "h": _BOX_H, "cx": cx,
                    "ty": 20 + r * _ROW + _BOX_H / 2, "text": text[k] + (f" ({checks})" if checks else ""),
                    "fill": box_fill({u.horizon_id for u in units if u.horizon_id}, len(k) > 1, colour), "bad": cycle or checks > 0,
                    "cycle": cycle, "href": (f"/camp/checks?unit={units[0].code}" if checks else
                                             f"/camp/units/{units[0].id}"),
                    "title": ("units in a cycle: " if cycle else "unit ") + text[k]
                    + (f", {checks} open check{'s' if checks != 1 else ''}" if checks else "")}
    lines = [{"x1": boxes[a]["cx"], "y1": boxes[a]["y"] + _BOX_H, "x2": boxes[b]["cx"], "y2": boxes[b]["y"]}
             for a, b in sorted(layout.lines, key=lambda ab: (text[ab[0]], text[ab[1]]))]
    rows = 1 + max((r for _x, r in layout.at.values()), default=-1)
    return {"boxes": sorted(boxes.values(), key=lambda b: (b["y"], b["x"])), "lines": lines,
            "width": int(_GAP + (max(xs) - left + 1) * pitch), "height": int(40 + max(rows, 1) * _ROW),
            "font": _FONT, "legend": [(colour[h.id], f"{h.code} {h.label}")
                                      for h in sorted(horizons, key=lambda h: h.order)] + [(NO_HORIZON, "no horizon yet")],
            "cycle": matrix.reduced is None}


@router.get("/matrix", response_class=HTMLResponse)
def matrix(request: Request) -> Response:
    from schema.records import Horizon
    from schema.strata.matrix import build_matrix

    session = _signed_in(request)
    store = request.app.state.store
    try:
        data = store.site_data()
    except BaulkError as exc:
        return _page(request, "matrix.html", session, "Matrix", page="matrix", picture=None, message=str(exc), error=True)
    picture = matrix_picture(build_matrix(data.units, data.relations), store.list(Horizon, site_id=data.site.id),
                             flagged_units(store))
    return _page(request, "matrix.html", session, "Matrix", page="matrix", picture=picture)


@router.get("/matrix.png")
def matrix_png(request: Request) -> Response:
    import tempfile

    from schema.records import Horizon
    from schema.strata.matrix import build_matrix

    from ..export_pictures import draw_matrix

    _signed_in(request)
    store = request.app.state.store
    data = store.site_data()
    with tempfile.TemporaryDirectory(prefix="baulk-matrix-") as tmp:
        draw_matrix(build_matrix(data.units, data.relations), store.list(Horizon, site_id=data.site.id),
                    set(flagged_units(store)), Path(tmp))
        png = (Path(tmp) / "harris_matrix.png").read_bytes()
    return Response(png, media_type="image/png")


@router.get("/exports", response_class=HTMLResponse)
def exports(request: Request) -> Response:
    return _page(request, "exports.html", _signed_in(request), "Exports", page="exports")


@router.get("/exports/download")
def exports_download(request: Request, strict: bool = False) -> Response:
    import shutil

    from fastapi.responses import FileResponse
    from starlette.background import BackgroundTask

    from ..exports import export_zip_to_send

    _signed_in(request)
    archive, work = export_zip_to_send(request.app.state.store, strict=strict,
                                       photos_dir=request.app.state.photos.root)

    return FileResponse(archive, media_type="application/zip", filename="baulk-export.zip",
                        background=BackgroundTask(shutil.rmtree, work, True))
