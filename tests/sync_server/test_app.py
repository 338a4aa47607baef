"""The HTTP app: in-process for most checks, a real uvicorn on loopback for the server as users start it."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient

from sync_server.app import ROUTE_ROLES, create_app, route_keys
from sync_server.settings import ServerSettings
from sync_server.store import ServerStore


@pytest.fixture
def client(tmp_path: Path):  # type: ignore[no-untyped-def]
    settings = ServerSettings(database_url=f"sqlite:///{tmp_path / 's.sqlite'}")
    with TestClient(create_app(settings)) as c:
        yield c


def test_status(client: TestClient) -> None:
    body = client.get("/v1/status").json()
    assert body["service"] == "baulk" and body["schema_version"] == 1 and body["backend"] == "sqlite"
    assert body["site_codes"] == []


def test_every_route_declares_its_role(client: TestClient) -> None:
    keys = route_keys(client.app)  # type: ignore[arg-type]
    assert keys, "the app serves no routes"
    assert sorted(k for k in keys if k not in ROUTE_ROLES) == []


def test_domain_errors_are_json_not_tracebacks(tmp_path: Path) -> None:
    from schema.errors import RecordNotFound

    app = create_app(store=ServerStore.open(f"sqlite:///{tmp_path / 's.sqlite'}"))

    @app.get("/v1/boom")
    def boom() -> None:
        raise RecordNotFound("no unit has id 1")

    with TestClient(app) as c:
        r = c.get("/v1/boom")
    assert r.status_code == 404 and r.json() == {"code": "RecordNotFound", "message": "no unit has id 1"}


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def test_baulk_serve_answers_on_loopback(tmp_path: Path) -> None:
    port = _free_port()
    db = tmp_path / "camp.sqlite"
    proc = subprocess.Popen(
        [sys.executable, "-m", "sync_server.cli", "serve", "--port", str(port), "--db", f"sqlite:///{db}"],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )
    try:
        body = None
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and body is None:
            try:
                body = httpx.get(f"http://127.0.0.1:{port}/v1/status", timeout=1).json()
            except httpx.TransportError:
                time.sleep(0.2)
        assert body is not None, "server did not answer within 30 s"
        assert body["service"] == "baulk"
        assert db.exists()
    finally:
        proc.terminate()
        out, _ = proc.communicate(timeout=15)
    assert f"listening on http://127.0.0.1:{port}/v1/" in out
