"""Camp pages for photos: the **Photos** register (filter by trench, unit, day and who; each photo opens full
size), the thumbnails and files it shows, and the photo strip on a find's and a unit's page (the template global
``photos_of``, included by ``find.html`` and ``unit.html``). Only photos whose file has arrived are shown as
pictures; the others are listed as "not yet received" (their tablet has not uploaded them). A manager voids a
wrong photo there with a reason, or restores a voided one (``sync_server.curation.void_photo``); a voided photo
stays listed, marked void with its reason."""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Any

import sqlalchemy as sa
from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import FileResponse, RedirectResponse, Response

from schema.errors import BaulkError
from schema.tables import metadata

from ..photos import PhotoVault, register_rows, withheld_photo
from .pages import _page, _q, _signed_in, site_zone, templates
from .session import current

__all__ = ["ROUTE_ROLES", "router"]

router = APIRouter(prefix="/camp", include_in_schema=False)

ROUTE_ROLES: dict[str, str] = {
    "GET /camp/photos": "page: manager, analyst",
    "GET /camp/photos/{sha256}": "page: manager, analyst",
    "GET /camp/photos/{sha256}/thumb.png": "page: manager, analyst",
    "POST /camp/photos/{photo_id}/void": "page: manager",
    "POST /camp/photos/{photo_id}/restore": "page: manager",
}

def _vault(request: Request) -> PhotoVault:
    return request.app.state.photos  # type: ignore[no-any-return]


def _names(conn: sa.Connection) -> dict[str, dict[uuid.UUID, str]]:
    find, unit, trench = (metadata.tables[n] for n in ("find", "unit", "trench"))
    return {
        "find": {r.id: f"find {r.number}" for r in conn.execute(sa.select(find.c.id, find.c.number))},
        "unit": {r.id: f"unit {r.code}" for r in conn.execute(sa.select(unit.c.id, unit.c.code))},
        "trench": {r.id: f"trench {r.code}" for r in conn.execute(sa.select(trench.c.id, trench.c.code))},
    }


def _shown(request: Request, rows: list[dict[str, Any]], names: dict[str, dict[uuid.UUID, str]]) -> list[dict[str, Any]]:
    from schema.withholding import SEES_POSITIONS

    session = current(request)
    sees = session is not None and session.device.role in SEES_POSITIONS
    zone = site_zone(request.app.state.store)
    vault = _vault(request)
    out = []
    for r in rows:
        taken = r["taken_at"]
        if taken.tzinfo is None:
            taken = taken.replace(tzinfo=dt.timezone.utc)
        subject = "the day" if r["subject"] == "day" else names.get(
            "unit" if r["subject"] == "level" else r["subject"], {}).get(r["subject_id"], r["subject"])
        out.append({**r, "taken": taken.astimezone(zone), "subject_name": subject,
                    "trench_code": names["trench"].get(r["trench_id"], "").removeprefix("trench "),
                    "name": f"{r['device_label'] or '?'}-P{r['number']}",
                    "withheld": bool(r["human_remains"]) and not sees,
                    "held": vault.has(r["sha256"]) and (sees or not r["human_remains"])})
    return out


def photos_of(request: Request, subject_id: uuid.UUID | str) -> list[dict[str, Any]]:
    """The photos of one find or unit, oldest first (a template global for the record pages)."""
    if current(request) is None:
        return []
    key = subject_id if isinstance(subject_id, uuid.UUID) else uuid.UUID(str(subject_id))
    with request.app.state.store.read() as conn:
        return _shown(request, register_rows(conn, subject_ids=[key], voided=True), _names(conn))


templates.env.globals["photos_of"] = photos_of


@router.get("/photos")
def register(request: Request, trench: str = "", unit: str = "", day: str = "", by: str = "",
             message: str | None = None) -> Response:
    """The photo register, filtered."""
    return _register_page(request, chosen={"trench": trench, "unit": unit, "day": day, "by": by}, message=message)


def _register_page(request: Request, *, chosen: dict[str, str], message: str | None = None, status: int = 200,
                   photo_error: tuple[str, str, dict[str, str]] | None = None) -> Response:
    session = _signed_in(request)
    with request.app.state.store.read() as conn:
        names = _names(conn)
        rows = _shown(request, register_rows(conn, voided=True), names)
    if chosen.get("trench"):
        rows = [r for r in rows if r["trench_code"] == chosen["trench"]]
    if chosen.get("unit"):
        rows = [r for r in rows if r["subject_name"] == f"unit {chosen['unit']}"]
    if chosen.get("day"):
        rows = [r for r in rows if r["taken"].date().isoformat() == chosen["day"]]
    if chosen.get("by"):
        rows = [r for r in rows if r["by"] == chosen["by"].upper()]
    trenches = sorted({c.removeprefix("trench ") for c in names["trench"].values()})
    return _page(request, "photos.html", session, "Photos", status=status, page="photos", rows=rows,
                 trenches=trenches, chosen=chosen, message=message, error=photo_error is not None,
                 photo_error=photo_error)


async def _photo_change(request: Request, photo_id: str, void: bool) -> Response:
    """A manager's void or restore from a photo list; back to that list (``back``, a camp page) when done, the
    register with the refusal beside the photo when refused."""
    from .. import curation
    from .curation_pages import _manager_post, _uuid

    verb = "void" if void else "restore"
    session, form, _ = await _manager_post(request, f"{verb} a photo")
    pid = _uuid(photo_id, "photo")
    act = curation.void_photo if void else curation.restore_photo
    try:
        done = act(request.app.state.store, photo_id=pid, reason=form.get("reason", ""),
                   by=form.get("by", "").strip() or session.device.label)
    except BaulkError as exc:
        return _register_page(request, chosen=dict.fromkeys(("trench", "unit", "day", "by"), ""), status=400,
                              photo_error=(str(pid), str(exc), form))
    state = "voided: kept in the register, marked void" if void else "restored: in force again"
    note = f"photo {done.label} ({done.subject}) {state}. Why: {done.reason}"
    back = form.get("back", "")
    if not back.startswith("/camp/") or "//" in back or "\\" in back:
        back = "/camp/photos"
    if back.split("?")[0] == "/camp/photos":
        return RedirectResponse(f"/camp/photos?message={_q(note)}#photo-{pid}", status_code=303)
    return RedirectResponse(f"{back}#photo-{pid}", status_code=303)


@router.post("/photos/{photo_id}/void")
async def photo_void(request: Request, photo_id: str) -> Response:
    return await _photo_change(request, photo_id, True)


@router.post("/photos/{photo_id}/restore")
async def photo_restore(request: Request, photo_id: str) -> Response:
    return await _photo_change(request, photo_id, False)


def _held(request: Request, sha256: str, role: str) -> None:
    """404 unless a photo record names ``sha256`` and its file is here (checked after the session)."""
    if len(sha256) != 64 or any(c not in "0123456789abcdef" for c in sha256):
        raise HTTPException(404, detail="a photo is named by its SHA-256 (64 lower-case hex digits)")
    photo = metadata.tables["photo"]
    with request.app.state.store.read() as conn:
        named = conn.execute(sa.select(photo.c.id).where(photo.c.sha256 == sha256).limit(1)).first()
        hidden = withheld_photo(conn, sha256, role)
    if named is None or hidden or not _vault(request).has(sha256):
        raise HTTPException(404, detail="this camp server holds no such photo (its tablet may not have sent it yet)")


@router.get("/photos/{sha256}")
def full_size(request: Request, sha256: str) -> Response:
    """A photo file, as it was taken."""
    session = _signed_in(request)
    _held(request, sha256, session.device.role)
    return FileResponse(_vault(request).path(sha256), media_type=_media_type(_vault(request).path(sha256)))


@router.get("/photos/{sha256}/thumb.png")
def thumb(request: Request, sha256: str) -> Response:
    """A photo's thumbnail (PNG, orientation applied)."""
    session = _signed_in(request)
    _held(request, sha256, session.device.role)
    return FileResponse(_vault(request).thumbnail(sha256), media_type="image/png")


def _media_type(path: Any) -> str:
    with open(path, "rb") as f:
        head = f.read(8)
    if head.startswith(b"\xff\xd8"):
        return "image/jpeg"
    if head.startswith(b"\x89PNG"):
        return "image/png"
    return "application/octet-stream"
