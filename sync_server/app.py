"""The camp server's HTTP app (FastAPI). Routes are versioned under ``/v1``; one route module per noun joins
here as the sync, device and export issues land. Errors are JSON ``{"code", "message"}``, never a stack trace.
"""

from __future__ import annotations

import contextlib
from typing import Any, AsyncIterator, Iterator

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, RedirectResponse
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.middleware.gzip import GZipMiddleware

from schema import SCHEMA_VERSION, __version__
from schema.errors import (
    BatchClash, BaulkError, DuplicateRecord, EnrolmentRefused, NumberTooFar, RecordInvalid, RecordNotFound,
    VersionIdMismatch, WrongDevice,
)

from .settings import ServerSettings
from .store import ServerStore
from .devices import EnrolRateLimit
from .headers import SecurityHeaders
from .limits import COMPRESS_ANSWERS, AnswerErrors, BodyLimit
from .photos import PhotoVault, default_photo_dir
from .tls import cert_fingerprint
from .validation import RevalidateAfterAnswer, Revalidator
from .web.curation_pages import ROUTE_ROLES as CURATION_ROLES
from .web.photo_pages import ROUTE_ROLES as PHOTO_PAGE_ROLES

__all__ = ["KEEP_ALIVE_S", "ROUTE_ROLES", "create_app"]

# How long the server keeps an idle connection open (uvicorn's timeout_keep_alive; its default is 5 s). It must
# be well above how long a client reuses an idle connection (httpx's keepalive_expiry, 5 s, on the tablets and in
# the benchmark): with the two equal, a request sent as the server's timer fires arrives on a socket being
# closed, and the kernel answers it with RST ("Connection reset by peer"). Every server start uses it
# (`baulk serve`, loopback.serve_in_thread).
KEEP_ALIVE_S = 75

# Every route declares who may call it; a test walks the app and fails on a route missing here.
ROUTE_ROLES: dict[str, str] = {
    "GET /v1/status": "public",
    "GET /": "public (sends a browser on to the camp pages)",
    "GET /v1/issues": "manager, analyst",
    "POST /v1/issues/{key}/accept": "manager",
    "POST /v1/sync/push": "recorder, manager",
    "GET /v1/sync/pull": "recorder, manager, analyst",
    "GET /v1/conflicts": "manager",
    "POST /v1/conflicts/resolve": "manager",
    "GET /v1/pending": "manager",
    "POST /v1/enrol": "public (a one-time code; rate-limited per address)",
    "GET /v1/devices": "manager",
    "POST /v1/devices": "manager",
    "POST /v1/devices/{device_id}/revoke": "manager",
    "GET /v1/audit": "manager",
    "GET /v1/exports/latest.zip": "manager, analyst",
    "GET /v1/finds": "manager, analyst",  # sync_server/routes/finds.py, units.py (sync_server/reading.py)
    "GET /v1/units": "manager, analyst",
    # photo files (sync_server/routes/photos.py; HEAD /v1/photos/uploads/{sha256} too: recorder, manager)
    "POST /v1/photos/missing": "recorder, manager",
    "POST /v1/photos/uploads": "recorder, manager",
    "PATCH /v1/photos/uploads/{sha256}": "recorder, manager",
    "GET /v1/photos/files/{sha256}": "recorder, manager, analyst",
    # camp pages: a session cookie from signing in with a manager or analyst token (sync_server/web)
    "GET /camp/sign-in": "public (the sign-in form)",
    "POST /camp/sign-in": "public (a manager or analyst token in the form)",
    "POST /camp/sign-out": "page: manager, analyst",
    "GET /camp/": "page: manager, analyst",
    "GET /camp/conflicts": "page: manager, analyst",
    "POST /camp/conflicts/resolve": "page: manager",
    "GET /camp/checks": "page: manager, analyst",
    "POST /camp/checks/accept": "page: manager",
    "GET /camp/finds": "page: manager, analyst",
    "GET /camp/finds/{find_id}": "page: manager, analyst",
    "GET /camp/safety": "page: manager, analyst",
    "GET /camp/matrix": "page: manager, analyst",
    "GET /camp/matrix.png": "page: manager, analyst",
    "GET /camp/exports": "page: manager, analyst",
    "GET /camp/exports/download": "page: manager, analyst",
    **CURATION_ROLES,  # Horizons, Dates, corrections, Site: sync_server/web/curation_pages.py
    **PHOTO_PAGE_ROLES,  # the Photos register, thumbnails and files: sync_server/web/photo_pages.py
}

_STATUS = {RecordInvalid: 422, RecordNotFound: 404, DuplicateRecord: 409, BatchClash: 409, WrongDevice: 403,
           VersionIdMismatch: 422, NumberTooFar: 409, EnrolmentRefused: 401}


class ErrorOut(BaseModel):
    """Every error answer: a stable code scripts can test, and a message that says what to do."""

    code: str = Field(examples=["Forbidden"])
    message: str = Field(examples=["a recorder device cannot do this; it needs the role manager"])


_HTTP_CODES = {400: "BadRequest", 401: "Unauthenticated", 403: "Forbidden", 404: "NotFound", 405: "MethodNotAllowed",
               409: "Conflict", 413: "BodyTooLarge", 422: "InputInvalid", 429: "TooManyRequests"}
ERROR_RESPONSES: dict[int | str, dict[str, Any]] = {
    status: {"model": ErrorOut, "description": name} for status, name in _HTTP_CODES.items()
    if status != 405
}


class Status(BaseModel):
    """What a tablet or a browser learns before enrolling: who this is and what it speaks."""

    service: str
    version: str
    schema_version: int
    backend: str
    site_codes: list[str]


def create_app(settings: ServerSettings | None = None, *, store: ServerStore | None = None) -> FastAPI:
    """The app; opens the store named by ``settings`` unless one is given."""
    settings = settings or ServerSettings()

    def attach(app: FastAPI, st: ServerStore) -> None:
        app.state.store = st
        app.state.revalidate = Revalidator(st)
        app.state.photos = PhotoVault(settings.photos_dir or default_photo_dir(st.url))

    @contextlib.asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        own = store is None
        if own:
            attach(app, ServerStore.open(settings.database_url))
        try:
            yield
        finally:
            if own:
                app.state.store.close()

    app = FastAPI(title="Baulk camp server", version=__version__, lifespan=lifespan)
    app.state.max_body_bytes = settings.max_body_bytes
    app.state.enrol_limit = EnrolRateLimit(limit=settings.enrol_attempts_per_minute)
    app.state.cert_fingerprint = cert_fingerprint(settings.tls_cert) if settings.tls_cert else None
    if store is not None:  # a given store is ready at once (in-process clients that run no lifespan)
        attach(app, store)

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(_request: Request, exc: StarletteHTTPException) -> JSONResponse:
        message = exc.detail if isinstance(exc.detail, str) else str(exc.detail)
        headers = dict(getattr(exc, "headers", None) or {})
        if exc.status_code == 405:  # every method the path answers, not just those of the first route matched
            headers["Allow"] = ", ".join(allowed_methods(_request.app, _request.scope))
        return JSONResponse({"code": _HTTP_CODES.get(exc.status_code, "HTTPError"), "message": message},
                            status_code=exc.status_code, headers=headers or None)

    @app.exception_handler(RequestValidationError)
    async def _invalid(_request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = exc.errors()
        first = errors[0] if errors else {"loc": (), "msg": "invalid request"}
        where = ".".join(str(p) for p in first.get("loc", ()) if p != "body") or "request"
        more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
        return JSONResponse({"code": "InputInvalid", "message": f"{where}: {first.get('msg')}{more}"}, status_code=422)

    @app.exception_handler(BaulkError)
    async def _baulk_error(_request: Request, exc: BaulkError) -> JSONResponse:
        code = type(exc).__name__
        return JSONResponse({"code": code, "message": str(exc)}, status_code=_STATUS.get(type(exc), 400))

    @app.get("/v1/status", response_model=Status, responses={413: ERROR_RESPONSES[413]})
    def status(request: Request) -> Status:
        """Service name, versions and the sites this server holds."""
        from schema.records import Site

        st: ServerStore = request.app.state.store
        return Status(
            service="baulk", version=__version__, schema_version=SCHEMA_VERSION, backend=st.backend,
            site_codes=sorted(s.code for s in st.list(Site)),
        )

    @app.get("/", include_in_schema=False)
    def root() -> RedirectResponse:
        """The server's bare address opens the camp pages (their sign-in page when no one is signed in)."""
        return RedirectResponse("/camp/", status_code=303)

    from .routes import devices, exports, issues, photos, sync
    from .routes import finds, units

    for module in (issues, sync, devices, exports, photos, finds, units):
        app.include_router(module.router, responses=ERROR_RESPONSES)
    from .web import curation_pages, pages, photo_pages

    app.include_router(pages.router)
    app.include_router(curation_pages.router)
    app.include_router(photo_pages.router)
    app.add_middleware(RevalidateAfterAnswer)  # checks run again after any request that changed records
    app.add_middleware(BodyLimit, limit=settings.max_body_bytes)
    app.add_middleware(AnswerErrors, limit=settings.max_body_bytes)  # an error is answered, never a reset
    app.add_middleware(SecurityHeaders)
    app.add_middleware(GZipMiddleware, **COMPRESS_ANSWERS)  # answers gzipped when asked for (limits.py)
    return app


def served_routes(routes: Any) -> Iterator[Any]:
    """Every route the app serves, routers included (FastAPI keeps an included router as one entry whose routes
    it builds when first asked)."""
    for route in routes:
        if hasattr(route, "effective_candidates"):
            yield from served_routes(route.effective_candidates())
        else:
            yield route


def allowed_methods(app: FastAPI, scope: Any) -> list[str]:
    """The methods the request's path answers (for ``Allow``); OPTIONS itself is never among them."""
    from starlette.routing import Match

    return sorted({m for r in served_routes(app.routes) if r.matches(scope)[0] != Match.NONE
                   for m in (getattr(r, "methods", None) or ())})


def route_keys(app: FastAPI) -> list[str]:
    """``METHOD /path`` for every route the app serves (OpenAPI and docs pages excluded)."""
    keys: list[str] = []
    skip = {app.openapi_url, app.docs_url, app.redoc_url, "/docs/oauth2-redirect"}
    for route in served_routes(app.routes):
        path: Any = getattr(route, "path", None)
        if path in skip:
            continue
        for method in sorted(getattr(route, "methods", ()) or ()):
            if method != "HEAD":
                keys.append(f"{method} {path}")
    return keys
