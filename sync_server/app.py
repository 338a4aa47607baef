"""The camp server's HTTP app (FastAPI). Routes are versioned under ``/v1``; one route module per noun joins
here as the sync, device and export issues land. Errors are JSON ``{"code", "message"}``, never a stack trace.
"""

from __future__ import annotations

import contextlib
from typing import Any, AsyncIterator

from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse
from pydantic import BaseModel

from schema import SCHEMA_VERSION, __version__
from schema.errors import BatchClash, BaulkError, DuplicateRecord, RecordInvalid, RecordNotFound, WrongDevice

from .settings import ServerSettings
from .store import ServerStore
from .validation import Revalidator

__all__ = ["ROUTE_ROLES", "create_app"]

# Every route declares who may call it; a test walks the app and fails on a route missing here.
ROUTE_ROLES: dict[str, str] = {
    "GET /v1/status": "public",
    "GET /v1/issues": "manager, analyst",
    "POST /v1/issues/{key}/accept": "manager",
    "POST /v1/sync/push": "recorder, manager",
    "GET /v1/sync/pull": "recorder, manager, analyst",
    "GET /v1/conflicts": "manager",
    "POST /v1/conflicts/resolve": "manager",
}

_STATUS = {RecordInvalid: 422, RecordNotFound: 404, DuplicateRecord: 409, BatchClash: 409, WrongDevice: 403}


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

    @contextlib.asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        own = store is None
        app.state.store = store or ServerStore.open(settings.database_url)
        app.state.revalidate = Revalidator(app.state.store)
        try:
            yield
        finally:
            if own:
                app.state.store.close()

    app = FastAPI(title="Baulk camp server", version=__version__, lifespan=lifespan)

    @app.exception_handler(BaulkError)
    async def _baulk_error(_request: Request, exc: BaulkError) -> JSONResponse:
        code = type(exc).__name__
        return JSONResponse({"code": code, "message": str(exc)}, status_code=_STATUS.get(type(exc), 400))

    @app.get("/v1/status", response_model=Status)
    def status(request: Request) -> Status:
        """Service name, versions and the sites this server holds."""
        from schema.records import Site

        st: ServerStore = request.app.state.store
        return Status(
            service="baulk", version=__version__, schema_version=SCHEMA_VERSION, backend=st.backend,
            site_codes=sorted(s.code for s in st.list(Site)),
        )

    from .routes import issues, sync

    app.include_router(issues.router)
    app.include_router(sync.router)
    return app


def route_keys(app: FastAPI) -> list[str]:
    """``METHOD /path`` for every route the app serves (OpenAPI and docs pages excluded)."""
    keys: list[str] = []
    skip = {app.openapi_url, app.docs_url, app.redoc_url, "/docs/oauth2-redirect"}
    for route in app.routes:
        path: Any = getattr(route, "path", None)
        if path in skip:
            continue
        for method in sorted(getattr(route, "methods", ()) or ()):
            if method != "HEAD":
                keys.append(f"{method} {path}")
    return keys
