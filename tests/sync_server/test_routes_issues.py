"""The issues routes: who may list and accept, and what they return."""

from __future__ import annotations

from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from schema.demo_site import build_site
from schema.records import Device, Find
from sync_server.app import create_app
from sync_server.store import ServerStore
from sync_server.validation import run_validation
from tests.helpers import find_data


@pytest.fixture
def camp(tmp_path: Path):  # type: ignore[no-untyped-def]
    store = ServerStore.open(f"sqlite:///{tmp_path / 's.sqlite'}")
    demo = build_site()
    for record in demo.setup_records():
        store.add(record)
    store.add(Find.model_validate(find_data(demo, number=1432, z=99.30)))
    run_validation(store)
    tokens = {role: store.add_device(label=role.upper(), role=role)[1] for role in ("recorder", "manager", "analyst")}
    with TestClient(create_app(store=store)) as client:
        yield client, store, tokens
    store.close()


def auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def test_reading_needs_manager_or_analyst(camp) -> None:  # type: ignore[no-untyped-def]
    client, _store, tokens = camp
    r = client.get("/v1/issues")
    assert r.status_code == 401 and r.headers["www-authenticate"] == "Bearer"
    assert client.get("/v1/issues", headers=auth("nonsense")).status_code == 401
    r = client.get("/v1/issues", headers=auth(tokens["recorder"]))
    assert r.status_code == 403 and r.json()["code"] == "Forbidden" and r.json()["message"] == "a recorder device cannot do this; it needs the role manager or analyst"
    body = client.get("/v1/issues", headers=auth(tokens["analyst"])).json()
    assert body["count"] == 1 and body["data"][0]["label"] == "find 1432"


def test_only_a_manager_accepts_and_needs_a_reason(camp) -> None:  # type: ignore[no-untyped-def]
    client, _store, tokens = camp
    key = client.get("/v1/issues", headers=auth(tokens["manager"])).json()["data"][0]["key"]
    url = f"/v1/issues/{key}/accept"
    assert client.post(url, json={"reason": "burrow"}, headers=auth(tokens["analyst"])).status_code == 403
    assert client.post(url, json={"reason": ""}, headers=auth(tokens["manager"])).status_code == 422
    assert client.post(url, json={"reason": "burrow", "by": "me"}, headers=auth(tokens["manager"])).status_code == 422
    r = client.post(url, json={"reason": "burrow seen in section"}, headers=auth(tokens["manager"]))
    assert r.status_code == 200 and r.json()["accepted_by"] == "MANAGER"
    r = client.post("/v1/issues/nope/accept", json={"reason": "burrow"}, headers=auth(tokens["manager"]))
    assert r.status_code == 404 and r.json()["code"] == "RecordNotFound"


def test_revoked_device_is_refused_at_once(camp) -> None:  # type: ignore[no-untyped-def]
    import datetime as dt

    client, store, tokens = camp
    device = store.device_for_token(tokens["analyst"])
    assert device is not None
    store.put(device.model_copy(update={"revoked_at": dt.datetime.now(dt.timezone.utc)}))
    assert client.get("/v1/issues", headers=auth(tokens["analyst"])).status_code == 401
    assert isinstance(device, Device)


def test_token_in_the_url_is_not_accepted(camp) -> None:  # type: ignore[no-untyped-def]
    client, _store, tokens = camp
    assert client.get(f"/v1/issues?token={tokens['manager']}").status_code == 401
