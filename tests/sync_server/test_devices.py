"""Devices: one-time enrolment codes (text, QR, PNG), the exchange for a token, revocation, roles on every
route, rate limits, body limits, the audit trail, and tokens kept out of logs."""

from __future__ import annotations

import datetime as dt
import logging
import re
from pathlib import Path

import httpx
import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient

from mobile.enrol import enrol, parse_enrol_line
from mobile.store import TabletStore
from mobile.sync import SyncClient
from schema.errors import EnrolmentRefused
from schema.records import Device, Find
from sync_server.app import ROUTE_ROLES, create_app
from sync_server.cli import cli
from sync_server.devices import enrol_line, make_code
from sync_server.settings import ServerSettings
from tests.helpers import find_data


def test_a_code_enrols_a_tablet_once_and_it_syncs(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    device, code, expires = make_code(server, label="TAB-4", role="recorder")
    assert re.fullmatch(r"[0-9A-HJKMNP-TV-Z]{4}-[0-9A-HJKMNP-TV-Z]{4}-[0-9A-HJKMNP-TV-Z]{4}", code)
    assert dt.timedelta(minutes=14) < expires - dt.datetime.now(dt.timezone.utc) <= dt.timedelta(minutes=15)
    assert server.device_for_token("") is None and server.get(Device, device.id).token_hash is None
    tablet = TabletStore.open(tmp / "tab4.sqlite")
    me = enrol(tablet, http, code.lower().replace("-", " "))  # typed in lower case with spaces: still the code
    assert me.id == device.id and tablet.device_id() == device.id and len(tablet.token() or "") >= 40
    # only the SHA-256 of the token is kept on the server
    import hashlib

    assert server.get(Device, device.id).token_hash == hashlib.sha256((tablet.token() or "").encode()).hexdigest()
    client = SyncClient(tablet, http, tablet.token() or "")
    client.sync()
    saved = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    client.sync()
    assert server.get(Find, saved.id).device_id == device.id
    with pytest.raises(EnrolmentRefused, match="was used already"):
        enrol(TabletStore.open(tmp / "again.sqlite"), http, code)


def test_unknown_and_expired_codes_are_refused(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    r = http.post("/v1/enrol", json={"code": "0000-0000-0000"})
    assert r.status_code == 401 and r.json()["code"] == "EnrolmentRefused" and "not known here" in r.json()["message"]
    _d, old, _e = make_code(server, label="TAB-5", role="recorder", now=dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=1))
    r = http.post("/v1/enrol", json={"code": old})
    assert r.status_code == 401 and "expired" in r.json()["message"]
    r = http.post("/v1/enrol", json={"code": old, "role": "manager"})  # unknown fields refused
    assert r.status_code == 422


def test_enrolment_is_rate_limited_per_address(tmp_path: Path) -> None:
    settings = ServerSettings(database_url=f"sqlite:///{tmp_path / 's.sqlite'}", enrol_attempts_per_minute=3)
    with TestClient(create_app(settings)) as http:
        codes = [http.post("/v1/enrol", json={"code": f"0000-0000-000{i}"}).status_code for i in range(5)]
    assert codes == [401, 401, 401, 429, 429]


def test_revocation_takes_effect_on_the_next_request(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    _device, code, _ = make_code(server, label="TAB-6", role="recorder")
    token = http.post("/v1/enrol", json={"code": code}).json()["token"]
    headers = {"Authorization": f"Bearer {token}"}
    assert http.get("/v1/sync/pull", headers=headers).status_code == 200
    out = CliRunner().invoke(cli, ["device", "revoke", "TAB-6", "--db", server.url])
    assert out.exit_code == 0 and "TAB-6 revoked" in out.output, out.output
    r = http.get("/v1/sync/pull", headers=headers)
    assert r.status_code == 401 and "revoked" in r.json()["message"] and r.json()["code"] == "Unauthenticated"


def _call(http: TestClient, key: str, token: str | None) -> int:
    method, path = key.split(" ", 1)
    path = path.replace("{key}", "X").replace("{device_id}", "00000000-0000-0000-0000-000000000001")
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    return http.request(method, path, headers=headers, json={} if method == "POST" else None).status_code


def test_every_guarded_route_refuses_no_token_a_revoked_one_and_the_wrong_role(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    tokens = {role: server.add_device(label=f"X-{role}", role=role)[1] for role in ("recorder", "manager", "analyst")}
    gone, gone_token = server.add_device(label="X-gone", role="manager")
    CliRunner().invoke(cli, ["device", "revoke", "X-gone", "--db", server.url])
    guarded = {k: v for k, v in ROUTE_ROLES.items() if not v.startswith(("public", "page"))}  # pages: test_pages.py
    assert len(guarded) >= 10
    for key, rule in guarded.items():
        allowed = {r.strip() for r in rule.split(",")}
        assert _call(http, key, None) == 401, key
        assert _call(http, key, "not-a-token") == 401, key
        assert _call(http, key, gone_token) == 401, key
        for role, token in tokens.items():
            status = _call(http, key, token)
            if role in allowed:
                assert status not in (401, 403), (key, role, status)
            else:
                assert status == 403, (key, role, status)


def test_a_body_over_the_limit_is_refused_before_it_is_read(tmp_path: Path) -> None:
    settings = ServerSettings(database_url=f"sqlite:///{tmp_path / 's.sqlite'}", max_body_bytes=4096)
    with TestClient(create_app(settings)) as http:
        r = http.post("/v1/enrol", content=b'{"code": "' + b"A" * 5000 + b'"}', headers={"content-type": "application/json"})
        assert r.status_code == 413 and r.json()["code"] == "BodyTooLarge"

        def chunks():  # type: ignore[no-untyped-def]
            for _ in range(10):
                yield b"x" * 1000

        token = http.app.state.store.add_device(label="TAB-1", role="recorder")[1]  # type: ignore[attr-defined]
        r = http.post("/v1/sync/push", content=chunks(), headers={"content-type": "application/json",
                                                                  "Authorization": f"Bearer {token}"})
        assert r.status_code == 413 and r.json()["code"] == "BodyTooLarge"  # sent with no length: counted


def test_the_audit_trail_names_the_device_and_the_change(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    _d, code, _ = make_code(server, label="TAB-7", role="recorder")
    tablet = TabletStore.open(tmp / "tab7.sqlite")
    enrol(tablet, http, code)
    client = SyncClient(tablet, http, tablet.token() or "")
    client.sync()
    saved = tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
    tablet.put(tablet.get(Find, saved.id).model_copy(update={"z": 99.7}))
    client.sync()
    manager = server.add_device(label="MGR", role="manager")[1]
    r = http.get("/v1/audit", params={"record": "find", "record_id": str(saved.id)},
                 headers={"Authorization": f"Bearer {manager}"})
    assert r.status_code == 200, r.text
    rows = r.json()["data"]
    assert {x["device"] for x in rows} == {"TAB-7"}
    assert [x["value"] for x in rows if x["field"] == "z"] == [99.81, 99.7]
    assert r.json()["count"] == len(rows) > 5


def test_device_add_prints_a_code_a_qr_and_writes_a_png_that_reads_back(tmp_path: Path) -> None:
    import segno
    from PIL import Image

    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    from sync_server.store import ServerStore

    ServerStore.open(url).close()  # made by baulk serve or baulk site init; device add only opens it
    png = tmp_path / "enrol.png"
    out = CliRunner().invoke(cli, ["device", "add", "--role", "recorder", "--label", "TAB-8", "--db", url,
                                   "--server", "http://192.168.8.10:8765", "--png", str(png)])
    assert out.exit_code == 0, out.output
    code = re.search(r"enrolment code: (\S+)", out.output).group(1)  # type: ignore[union-attr]
    assert "█" in out.output or "▀" in out.output  # the QR code drawn in the terminal
    line = enrol_line("http://192.168.8.10:8765", code)
    assert parse_enrol_line(line) == {"server": "http://192.168.8.10:8765", "code": code}
    # the PNG, read back by Pillow, holds the same modules as the QR code of that line (scale 8, border 4)
    img = Image.open(png).convert("L")
    matrix = segno.make(line, error="m").matrix
    n = len(matrix)
    assert img.size == ((n + 8) * 8, (n + 8) * 8)
    read = [[img.getpixel(((4 + x) * 8 + 4, (4 + y) * 8 + 4)) < 128 for x in range(n)] for y in range(n)]
    assert read == [[bool(v) for v in row] for row in matrix]
    listed = CliRunner().invoke(cli, ["device", "list", "--db", url])
    assert "TAB-8" in listed.output and "code not used" in listed.output


def test_tokens_never_reach_the_logs(tmp_path: Path, caplog: pytest.LogCaptureFixture) -> None:
    from sync_server.loopback import serve_in_thread
    from sync_server.store import ServerStore

    store = ServerStore.open(f"sqlite:///{tmp_path / 's.sqlite'}")
    _d, code, _ = make_code(store, label="TAB-9", role="recorder")
    caplog.set_level(logging.DEBUG)
    with serve_in_thread(create_app(store=store)) as base, httpx.Client(base_url=base) as http:
        token = http.post("/v1/enrol", json={"code": code}).json()["token"]
        headers = {"Authorization": f"Bearer {token}"}
        http.get("/v1/sync/pull", headers=headers)
        http.get("/v1/conflicts", headers=headers)  # refused: logged as a 403, without the token
        http.get("/v1/sync/pull", headers={"Authorization": "Bearer wrong-token-123"})
    text = "\n".join(r.getMessage() for r in caplog.records)
    assert caplog.records, "nothing was logged at all: the check would prove nothing"
    assert token not in text and "wrong-token-123" not in text and code not in text
    store.close()
