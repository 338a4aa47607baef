"""Sessions, logs, headers and small inputs at the edges of the camp server.

Signing out ends the session on the server; the access log never holds a token; a forwarded client address is
believed only from a proxy the operator names (so the enrolment rate limit holds); the camp pages tell the
browser what it may do (CSP, no framing, no sniffing, no referrer); every path answers OPTIONS with the methods
it serves; a device label must be readable text; a bundle's batch numbers start at 1.
"""

from __future__ import annotations

import base64
import contextlib
import hashlib
import os
import re
import secrets
import socket
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Iterator

import httpx
import pytest
from click.testing import CliRunner

from mobile import outbox
from schema.records import Device, Find
from sync_server.app import ROUTE_ROLES, route_keys, served_routes
from sync_server.cli import cli
from tests.helpers import find_data, safety_day, synced_tablet, unit_conflict

FORM = {"content-type": "application/x-www-form-urlencoded"}


def _sign_in(http: Any, token: str) -> tuple[str, str]:
    """Sign in with a token; returns the session cookie and the page's CSRF token."""
    r = http.post("/camp/sign-in", content=f"token={token}", headers=FORM, follow_redirects=False)
    assert r.status_code == 303, r.text
    cookie = http.cookies.get("baulk_camp")
    csrf = re.search(r'name="csrf" value="([^"]+)"', http.get("/camp/").text).group(1)  # type: ignore[union-attr]
    return cookie, csrf


# -- sessions -------------------------------------------------------------------------------------------------
def test_signing_out_ends_the_session_on_the_server(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    manager = server.add_device(label="MGR", role="manager")[1]
    cookie, csrf = _sign_in(http, manager)
    kept = {"cookie": f"baulk_camp={cookie}"}  # a copy of the cookie, kept by whoever got hold of it
    assert http.get("/camp/", headers=kept, follow_redirects=False).status_code == 200  # it works...
    r = http.post("/camp/sign-out", content=f"csrf={csrf}", headers=FORM, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/camp/sign-in"
    http.cookies.clear()
    for path in ("/camp/", "/camp/finds", "/camp/checks"):  # ...until its device signs out
        r = http.get(path, headers=kept, follow_redirects=False)
        assert r.status_code == 303 and r.headers["location"] == "/camp/sign-in", path
    r = http.post("/camp/checks/accept", content=f"csrf={csrf}&key=x&reason=because", headers={**FORM, **kept},
                  follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/camp/sign-in"
    # signing in again makes a session that works, and the old cookie still opens nothing
    _sign_in(http, manager)
    assert http.get("/camp/", follow_redirects=False).status_code == 200
    http.cookies.clear()
    assert http.get("/camp/", headers=kept, follow_redirects=False).status_code == 303


# -- a real `baulk serve` -------------------------------------------------------------------------------------
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextlib.contextmanager
def _serve(tmp: Path, *args: str, env: dict[str, str] | None = None) -> Iterator[tuple[str, list[str]]]:
    """``baulk serve`` in its own process on a free loopback port: (base URL, its output once stopped)."""
    port = _free_port()
    proc = subprocess.Popen(
        [sys.executable, "-m", "sync_server.cli", "serve", "--port", str(port), "--db", f"sqlite:///{tmp / 'camp.sqlite'}",
         *args], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1", **(env or {})})
    base, output = f"http://127.0.0.1:{port}", []
    try:
        for _ in range(300):  # up to about a minute on a loaded machine; no timing is asserted
            try:
                httpx.get(f"{base}/v1/status", timeout=2)
                break
            except httpx.TransportError:
                time.sleep(0.2)
        else:
            raise AssertionError("baulk serve did not answer")
        yield base, output
    finally:
        proc.terminate()
        out, _ = proc.communicate(timeout=30)
        output.append(out)


def test_the_access_log_never_holds_a_token(tmp_path: Path) -> None:
    token = secrets.token_urlsafe(32)
    with _serve(tmp_path) as (base, output):
        for target in ("/v1/status?token=SECRET-ONE", f"/v1/status?q={token}", "/v1/status?Access_Key=SECRET-TWO&x=1",
                       "/camp/sign-in?session=SECRET-THREE", "/v1/status?severity=error"):
            assert httpx.get(base + target).status_code == 200
    log = output[0]
    assert "SECRET" not in log and token not in log
    for line in ('"GET /v1/status?token=[redacted] HTTP/1.1" 200', '"GET /v1/status?q=[redacted] HTTP/1.1" 200',
                 '"GET /v1/status?Access_Key=[redacted]&x=1 HTTP/1.1" 200',
                 '"GET /camp/sign-in?session=[redacted] HTTP/1.1" 200', '"GET /v1/status?severity=error HTTP/1.1" 200'):
        assert line in log, (line, log)


def _enrol(base: str, forwarded_for: str | None) -> int:
    headers = {"X-Forwarded-For": forwarded_for} if forwarded_for else {}
    return httpx.post(f"{base}/v1/enrol", json={"code": "AAAA-BBBB-CCCC"}, headers=headers).status_code


def test_forwarded_addresses_are_believed_only_from_a_named_proxy(tmp_path: Path) -> None:
    env = {"BAULK_SERVER_ENROL_ATTEMPTS_PER_MINUTE": "3"}
    with _serve(tmp_path, env=env) as (base, _out):  # no proxy named: the header changes nothing
        assert [_enrol(base, f"203.0.113.{k}") for k in range(6)] == [401, 401, 401, 429, 429, 429]
        assert _enrol(base, None) == 429
    with _serve(tmp_path, "--forwarded-allow-ips", "127.0.0.1", env=env) as (base, output):
        assert [_enrol(base, f"203.0.113.{k}") for k in range(6)] == [401] * 6  # each client its own budget...
        assert [_enrol(base, "198.51.100.7") for _ in range(4)] == [401, 401, 401, 429]  # ...and it holds
    assert "believing X-Forwarded-For from 127.0.0.1 only" in output[0]


# -- what a browser is told -----------------------------------------------------------------------------------
def _pages(server: Any, demo: Any, http: Any, tmp: Path) -> list[str]:
    """Every camp page a manager can open, on a site with finds, a conflict and safety checks."""
    bone = safety_day(server, demo, http, tmp)
    pairs = [synced_tablet(server, http, tmp, label) for label in ("TAB-8", "TAB-9")]
    (t8, c8), _ = pairs
    flake = t8.save_find(find=find_data(demo, number=t8.next_find_number()))
    c8.sync()
    unit_conflict(demo, pairs[0], pairs[1], flake)
    keys = [k.split(" ", 1)[1] for k, v in ROUTE_ROLES.items() if k.startswith("GET /camp") and "matrix.png" not in k
            and "download" not in k and "{sha256}" not in k]  # picture files, not pages
    return [k.replace("{find_id}", str(bone.id)).replace("{unit_id}", str(demo.units["101"].id)) for k in keys]


def test_camp_pages_carry_security_headers_and_a_policy_their_own_markup_keeps(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    paths = _pages(server, demo, http, tmp)
    assert len(paths) >= 10
    _sign_in(http, server.add_device(label="MGR", role="manager")[1])
    for path in paths:
        r = http.get(path, follow_redirects=False)
        assert r.status_code == 200, path
        assert (r.headers["x-frame-options"], r.headers["x-content-type-options"], r.headers["referrer-policy"]) == (
            "DENY", "nosniff", "no-referrer"), path
        policy = dict(p.strip().split(" ", 1) for p in r.headers["content-security-policy"].split(";"))
        assert policy["default-src"] == "'none'" and policy["script-src"] == "'none'", path
        assert policy["frame-ancestors"] == "'none'" and policy["form-action"] == "'self'", path
        assert "unsafe" not in r.headers["content-security-policy"], path
        assert "<script" not in r.text and not re.search(r"\sstyle=|\son[a-z]+=", r.text), path  # nothing inline...
        styles = re.findall(r"<style>(.*?)</style>", r.text, flags=re.S)
        assert styles, path  # ...but the style sheet, which the policy names by its hash
        for body in styles:
            digest = base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()
            assert policy["style-src"].split() == [f"'sha256-{digest}'"], path
    for path in ("/camp/sign-in", "/camp/matrix.png"):
        assert http.get(path).headers["x-frame-options"] == "DENY"
    api = http.get("/v1/status")
    assert api.headers["x-content-type-options"] == "nosniff" and "content-security-policy" not in api.headers


def test_options_names_the_methods_each_path_serves(camp) -> None:  # type: ignore[no-untyped-def]
    _server, _demo, http, _tmp = camp
    keys = route_keys(http.app)
    assert sorted(keys) == sorted(ROUTE_ROLES)  # every served route is seen (routers included), and has its rule
    methods: dict[str, set[str]] = {}
    for key in keys:
        method, path = key.split(" ", 1)
        methods.setdefault(path, set()).add(method)
    for route in served_routes(http.app.routes):  # a HEAD a route declares on its own (tus: where an upload stands)
        if getattr(route, "methods", None) == {"HEAD"}:
            methods.setdefault(route.path, set()).add("HEAD")
    for path, served in methods.items():
        concrete = re.sub(r"\{[a-z_]+\}", "00000000-0000-0000-0000-000000000001", path)
        r = http.options(concrete)
        assert r.status_code == 405 and r.json()["code"] == "MethodNotAllowed", path
        assert set(r.headers["allow"].split(", ")) == served, path


# -- labels and bundle batches --------------------------------------------------------------------------------
BAD_LABELS = [
    ("TAB\x07-1", "the label 'TAB\\x07-1' holds U+0007, a control or invisible character", "type the label again with "
     "letters, digits, spaces and punctuation only, e.g. TAB-4 or Finds lab laptop"),
    ("TAB-1\nadmin", "the label 'TAB-1\\nadmin' holds U+000A, a control or invisible character", "type the label again "
     "with letters, digits, spaces and punctuation only, e.g. TAB-4 or Finds lab laptop"),
    ("TAB\u202e1-BAT", "the label 'TAB\\u202e1-BAT' holds U+202E, a control or invisible character", "type the label "
     "again with letters, digits, spaces and punctuation only, e.g. TAB-4 or Finds lab laptop"),
    ("   ", "the label '   ' is only spaces", "give the device a label people can read, e.g. TAB-4 or Finds lab "
     "laptop"),
]


@pytest.mark.parametrize(("label", "problem", "fix"), BAD_LABELS)
def test_a_device_label_must_be_readable_text(camp, label: str, problem: str, fix: str) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, tmp = camp
    message = f"device refused, nothing was saved. label: {problem}. Fix: {fix}"
    manager = {"Authorization": f"Bearer {server.add_device(label='MGR', role='manager')[1]}"}
    r = http.post("/v1/devices", json={"label": label, "role": "recorder"}, headers=manager)
    assert r.status_code == 422 and r.json() == {"code": "RecordInvalid", "message": message}
    url = server.engine.url.render_as_string(hide_password=False)
    done = CliRunner().invoke(cli, ["device", "add", "--role", "recorder", "--label", label, "--db", url])
    assert (done.exit_code, done.output) == (1, f"Error: {message}\n")
    assert [d.label for d in server.list(Device)] == ["MGR"]


@pytest.mark.parametrize("number", [0, -3])
def test_a_bundle_batch_number_below_1_is_refused(camp, number: int) -> None:  # type: ignore[no-untyped-def]
    from schema.sync.bundle import write_bundle

    server, demo, http, tmp = camp
    t1, _c1 = synced_tablet(server, http, tmp, "TAB-1")
    t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    outbox.cut_batches(t1)
    (first,) = outbox.unacked_batches(t1)
    path = tmp / "low.baulkbundle"
    write_bundle(path, device=t1.device_id(), label="TAB-1", token=t1.token(),
                 batches=[(number, outbox.batch_versions(t1, first))])
    url = server.engine.url.render_as_string(hide_password=False)
    done = CliRunner().invoke(cli, ["bundle", "import", str(path), "--db", url])
    assert (done.exit_code, done.output) == (1, (
        "Error: low.baulkbundle: the manifest's batch list is not one Baulk writes: entry 1 needs a batch number from "
        "1 to 9007199254740991, a file, a version count and a hash; nothing was imported\n"))
    assert server.count(Find) == 0
