"""Scriptable and browser-only enrolment: ``baulk device add --json``, and the camp sign-in page taking a
manager's or analyst's one-time code (or its whole ``baulk-enrol:`` line) through the same exchange as
``POST /v1/enrol``: the browser is signed in and shown the device token once; a recorder's code is refused
unspent; wrong, used and expired codes get the API's own message; the enrolment rate limit holds."""

from __future__ import annotations

import datetime as dt
import json
import re
from pathlib import Path
from urllib.parse import quote

import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient
from markupsafe import escape

from schema.records import Device
from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.devices import enrol_line, make_code
from sync_server.settings import ServerSettings
from sync_server.store import ServerStore
from tests.helpers import seeded_server

FORM = {"content-type": "application/x-www-form-urlencoded"}
CODE = r"[0-9A-HJKMNP-TV-Z]{4}-[0-9A-HJKMNP-TV-Z]{4}-[0-9A-HJKMNP-TV-Z]{4}"


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    with TestClient(create_app(store=server), follow_redirects=False) as http:
        yield server, demo, http, tmp_path
    server.close()


def _shown_token(page: str) -> str:
    return re.search(r'id="token" value="([^"]+)" readonly', page).group(1)  # type: ignore[union-attr]


# -- baulk device add --json ---------------------------------------------------------------------------------

def test_device_add_json_prints_one_object_and_nothing_else(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    ServerStore.open(url).close()
    r = CliRunner().invoke(cli, ["device", "add", "--role", "manager", "--label", "DM-LAPTOP", "--db", url,
                                 "--server", "http://192.168.8.10:8765", "--json"])
    assert r.exit_code == 0, r.output
    assert r.stdout.count("\n") == 1 and "█" not in r.stdout and "▀" not in r.stdout
    got = json.loads(r.stdout)
    assert list(got) == ["device", "code", "expires_at", "enrol_line", "server", "fingerprint"]
    with ServerStore.open(url) as store:
        (dev,) = store.list(Device)
    assert got["device"] == {"id": str(dev.id), "label": "DM-LAPTOP", "role": "manager"}
    assert re.fullmatch(CODE, got["code"])
    expires = dt.datetime.fromisoformat(got["expires_at"])
    assert expires.utcoffset() == dt.timedelta(0)
    assert dt.timedelta(minutes=14) < expires - dt.datetime.now(dt.timezone.utc) <= dt.timedelta(minutes=15)
    assert got["server"] == "http://192.168.8.10:8765" and got["fingerprint"] is None
    assert got["enrol_line"] == enrol_line("http://192.168.8.10:8765", got["code"])
    with ServerStore.open(url) as store, TestClient(create_app(store=store)) as http:  # the code works
        assert http.post("/v1/enrol", json={"code": got["code"]}).json()["device_id"] == str(dev.id)


def test_device_add_json_carries_the_certificate_fingerprint(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from sync_server.tls import cert_fingerprint, make_camp_certificates

    certs = make_camp_certificates(tmp_path / "tls", hostnames=["camp-laptop"], ips=["192.168.8.10"], days=30)
    monkeypatch.setenv("BAULK_SERVER_TLS_CERT", str(certs["cert"]))
    monkeypatch.setenv("BAULK_SERVER_TLS_KEY", str(certs["key"]))
    url = f"sqlite:///{tmp_path / 's.sqlite'}"
    ServerStore.open(url).close()
    png = tmp_path / "enrol.png"
    r = CliRunner().invoke(cli, ["device", "add", "--role", "analyst", "--label", "AN-1", "--db", url,
                                 "--server", "https://camp-laptop:8765", "--png", str(png), "--json"])
    assert r.exit_code == 0, r.output
    got = json.loads(r.stdout)
    assert got["fingerprint"] == cert_fingerprint(Path(certs["cert"])) is not None
    assert got["enrol_line"] == enrol_line("https://camp-laptop:8765", got["code"], fingerprint=got["fingerprint"])
    assert png.stat().st_size > 0


# -- the sign-in page ------------------------------------------------------------------------------------------

def test_the_sign_in_page_offers_the_code(camp) -> None:  # type: ignore[no-untyped-def]
    _server, _demo, http, _tmp = camp
    page = http.get("/camp/sign-in").text
    assert 'name="token"' in page and 'name="code"' in page and "baulk-enrol:" in page


def test_a_managers_code_signs_the_browser_in_and_shows_the_token_once(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    device, code, _ = make_code(server, label="DM-LAPTOP", role="manager")
    r = http.post("/camp/sign-in", content=f"code={code}", headers=FORM)
    assert r.status_code == 200, r.text
    cookie = r.headers["set-cookie"]
    assert cookie.startswith("baulk_camp=") and "HttpOnly" in cookie and "Path=/camp" in cookie
    assert "samesite=strict" in cookie.lower() and "Max-Age=43200" in cookie
    assert r.headers["cache-control"] == "no-store"
    token = _shown_token(r.text)
    assert r.text.count(token) == 1
    assert "This browser is signed in as <strong>DM-LAPTOP</strong> (manager)." in r.text
    assert ("it is shown only this once,\n  and it is the only way to sign in again later (the enrolment code is "
            "used up).") in r.text
    assert server.device_for_token(token) == server.get(Device, device.id)  # the same exchange as the API's
    today = http.get("/camp/")
    assert today.status_code == 200 and token not in today.text
    # the code is spent; the kept token signs in again later
    again = http.post("/camp/sign-in", content=f"code={code}", headers=FORM)
    assert again.status_code == 401
    assert str(escape("this enrolment code was used already; ask the data manager for a new one")) in again.text
    csrf = re.search(r'name="csrf" value="([^"]+)"', today.text).group(1)  # type: ignore[union-attr]
    http.post("/camp/sign-out", content=f"csrf={csrf}", headers=FORM)
    assert http.get("/camp/").status_code == 303
    back = http.post("/camp/sign-in", content=f"token={token}", headers=FORM)
    assert back.status_code == 303 and http.get("/camp/").status_code == 200


def test_an_analysts_whole_enrol_line_is_taken(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    device, code, _ = make_code(server, label="AN-1", role="analyst")
    line = enrol_line("https://camp-laptop:8765", code, fingerprint="ab:cd")
    r = http.post("/camp/sign-in", content=f"code={quote(line, safe='')}", headers=FORM)
    assert r.status_code == 200, r.text
    assert server.device_for_token(_shown_token(r.text)).id == device.id  # type: ignore[union-attr]
    assert http.get("/camp/").status_code == 200


def test_a_recorders_code_is_refused_and_not_spent(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    device, code, expires = make_code(server, label="TAB-4", role="recorder")
    r = http.post("/camp/sign-in", content=f"code={code}", headers=FORM)
    assert r.status_code == 401 and "set-cookie" not in r.headers
    assert str(escape(
        "this code enrols TAB-4, a recorder: recorder codes are for tablets, so type or scan it on that tablet's "
        f"Camp screen (it is not used up and stays good until {expires:%H:%M} UTC); sign in here with a manager's "
        "or an analyst's code or token")) in r.text
    assert server.get(Device, device.id).token_hash is None
    enrolled = http.post("/v1/enrol", json={"code": code})  # the tablet can still use it
    assert enrolled.status_code == 200 and enrolled.json()["device_id"] == str(device.id)


def test_wrong_used_and_expired_codes_get_the_apis_message(camp) -> None:  # type: ignore[no-untyped-def]
    server, _demo, http, _tmp = camp
    _d, expired, _ = make_code(server, label="DM-OLD", role="manager",
                               now=dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=1))
    messages = []
    for code in ("ZZZZ-ZZZZ-ZZZZ", expired):
        api = http.post("/v1/enrol", json={"code": code})
        page = http.post("/camp/sign-in", content=f"code={code}", headers=FORM)
        assert api.status_code == page.status_code == 401
        assert f'<p class="card error" role="status">{escape(api.json()["message"])}</p>' in page.text
        assert "set-cookie" not in page.headers
        messages.append(api.json()["message"])
    assert messages[0] == "this enrolment code is not known here; check it, or ask the data manager for a new one"
    assert messages[1].startswith("this enrolment code expired at ")
    empty_line = http.post("/camp/sign-in", content=f"code={quote('baulk-enrol:?server=http://x', safe='')}",
                           headers=FORM)
    assert empty_line.status_code == 401
    assert str(escape("this baulk-enrol: line holds no code; paste the whole line again or type the code")) in empty_line.text


def test_the_enrolment_rate_limit_covers_the_page(tmp_path: Path) -> None:
    server, _demo = seeded_server(f"sqlite:///{tmp_path / 'server.sqlite'}")
    app = create_app(ServerSettings(database_url=server.url, enrol_attempts_per_minute=2), store=server)
    _d, code, _ = make_code(server, label="DM-LAPTOP", role="manager")
    with TestClient(app, follow_redirects=False) as http:
        assert http.post("/v1/enrol", json={"code": "ZZZZ-ZZZZ-ZZZZ"}).status_code == 401
        assert http.post("/camp/sign-in", content="code=ZZZZ-ZZZZ-ZZZZ", headers=FORM).status_code == 401
        r = http.post("/camp/sign-in", content=f"code={code}", headers=FORM)
        assert r.status_code == 429 and "set-cookie" not in r.headers
        assert str(escape("too many enrolment attempts from this address; wait a minute and try again")) in r.text
        assert http.post("/v1/enrol", json={"code": code}).json()["message"] == (
            "too many enrolment attempts from this address; wait a minute and try again")
    assert server.list(Device, label="DM-LAPTOP")[0].token_hash is None  # the good code was not spent
    server.close()
