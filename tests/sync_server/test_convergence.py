"""Convergence of five tablets and the camp server under skewed clocks, random edits (voids included), random
sync order, dropped requests, responses lost after the server committed, and batches sent again.

The checker (``assert_converged``) is itself tested: two deliberately broken clients are caught by it.
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
import uuid
from pathlib import Path
from typing import Any

import httpx
import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, precondition, rule

from mobile import outbox
from mobile.store import TabletStore
from mobile.sync import ATTEMPTS, SyncClient
from schema.errors import SyncError
from schema.records import Find, Season, Site, Trench, Unit
from schema.sync.replica import state_set
from schema.sync.tables import field_version, open_conflict
from sync_server.app import create_app
from sync_server.store import ServerStore
from sync_server.tables import push_batch

EXAMPLES = 500 if os.environ.get("CI") == "true" else 40
TZ = dt.timezone.utc


class Faults(httpx.BaseTransport):
    """Wraps the app's transport: may drop the request, or lose the response after the server committed. A fault
    lasts for every attempt the client makes at one request (``mobile.sync.ATTEMPTS``: the link is down for that
    sync), so a sync with a fault fails as it did before the client sent dropped requests again."""

    def __init__(self, inner: httpx.BaseTransport):
        self.inner, self.mode, self.left = inner, "ok", 0

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        mode = self.mode
        if mode != "ok":
            self.left -= 1
            if self.left <= 0:
                self.mode = "ok"
        if mode == "drop_request":
            raise httpx.ConnectError("dropped before sending")
        inner = self.inner.handle_request(request)
        body = b"".join(inner.iter_raw())  # as sent (gzip-compressed): the headers below still say so
        if mode == "drop_response":
            raise httpx.ReadError("connection lost after the server answered")
        return httpx.Response(inner.status_code, headers=list(inner.headers.items()), content=body)


def _site_records() -> list[Any]:
    site = Site(code="CVG", name="Convergence site", crs_epsg=32736)
    season = Season(site_id=site.id, label="2026", starts_on=dt.date(2026, 7, 1))
    trench = Trench(site_id=site.id, code="T1", outline=[(0.0, 0.0), (4.0, 0.0), (4.0, 3.0), (0.0, 3.0)])
    units = [Unit(site_id=site.id, trench_id=trench.id, code=f"U{i}", kind="deposit", opened_on=dt.date(2026, 7, 1),
                  recorder="AK") for i in range(3)]
    return [site, season, trench, *units]


@pytest.fixture(scope="module")
def templates(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """A migrated server file with the site set up, and a migrated empty tablet file, copied per example."""
    root = tmp_path_factory.mktemp("templates")
    records = _site_records()
    with ServerStore.open(f"sqlite:///{root / 'server.sqlite'}") as server:
        with server.atomic():
            for r in records:
                server.add(r)
    TabletStore.open(root / "tablet.sqlite").close()
    return {"root": root, "records": records}


def assert_converged(server: ServerStore, tablets: list[TabletStore], made: set[str]) -> None:
    """Identical version sets, visible finds and open conflicts everywhere; nothing lost; no batch twice."""
    def versions(store: Any) -> set[str]:
        with store.read() as conn:
            return set(conn.execute(sa.select(field_version.c.id)).scalars())

    def conflicts(store: Any) -> set[tuple[str, str]]:
        with store.read() as conn:
            return {(str(r.record_id), r.field) for r in conn.execute(sa.select(open_conflict))}

    on_server = versions(server)
    assert made <= on_server, f"{len(made - on_server)} versions never reached the server"
    tablet_sets = [versions(t) for t in tablets]
    want = on_server - _server_private(server)
    for s in tablet_sets:
        assert s >= want, f"a tablet misses {len(want - s)} versions"
    finds = sorted((f.id, f.unit_id, f.z, f.voided) for f in server.list(Find))
    for t in tablets:
        assert sorted((f.id, f.unit_id, f.z, f.voided) for f in t.list(Find)) == finds
        assert conflicts(t) == conflicts(server)
    with server.read() as conn:
        batches = conn.execute(sa.select(push_batch.c.device, push_batch.c.batch)).all()
        logged = conn.execute(sa.select(sa.func.count()).select_from(field_version)
                              .where(field_version.c.log_seq.is_not(None))).scalar_one()
    assert len(batches) == len(set(batches))
    assert logged == len(on_server), "every version holds exactly one change-log position"


def _server_private(server: ServerStore) -> set[str]:
    """Versions that travel only to their own device (other devices' number blocks)."""
    with server.read() as conn:
        return set(conn.execute(sa.select(field_version.c.id).where(field_version.c.record == "number_block")).scalars())


class Camp(RuleBasedStateMachine):
    templates: dict[str, Any] = {}
    broken: str | None = None

    @initialize(skews=st.lists(st.integers(-86_400_000, 86_400_000), min_size=5, max_size=5))
    def set_up(self, skews: list[int]) -> None:
        import tempfile

        self.dir = Path(tempfile.mkdtemp(prefix="baulk-cvg-"))
        shutil.copy(self.templates["root"] / "server.sqlite", self.dir / "server.sqlite")
        self.server = ServerStore.open(f"sqlite:///{self.dir / 'server.sqlite'}")
        self.http = TestClient(create_app(store=self.server))
        self.http.__enter__()
        self.faults: list[Faults] = []
        self.tablets: list[TabletStore] = []
        self.clients: list[SyncClient] = []
        self.finds: list[uuid.UUID] = []
        self.made: set[str] = set()
        for i, skew in enumerate(skews):
            device, token = self.server.add_device(label=f"T{i}", role="recorder")
            self.server.issue_number_block(device_id=device.id, size=1000)
            shutil.copy(self.templates["root"] / "tablet.sqlite", self.dir / f"t{i}.sqlite")
            t = TabletStore.open(self.dir / f"t{i}.sqlite")
            t.set_identity(device=device)
            with t.atomic() as conn:
                state_set(conn, "clock_offset_ms", skew)  # a tablet whose clock is off by up to a day
            faults = Faults(self.http._transport)  # noqa: SLF001
            http = httpx.Client(transport=faults, base_url="http://camp")
            SyncClient(t, http, token, batch_size=7, retry_wait_s=0).sync()  # enrolment at camp, before any fault
            kind = BROKEN[self.broken] if self.broken and i in (0, 1) else SyncClient
            self.tablets.append(t)
            self.clients.append(kind(t, http, token, batch_size=7, retry_wait_s=0))
            self.faults.append(faults)
        self.units = [r for r in self.templates["records"] if isinstance(r, Unit)]
        self.site = self.templates["records"][0]

    def _own(self, i: int) -> set[str]:
        with self.tablets[i].read() as conn:
            return set(conn.execute(sa.select(field_version.c.id).where(
                field_version.c.device == self.tablets[i].device_id())).scalars())

    @rule(i=st.integers(0, 4), unit=st.integers(0, 2), z=st.floats(99.0, 100.0))
    def new_find(self, i: int, unit: int, z: float) -> None:
        t = self.tablets[i]
        f = t.save_find(find=dict(
            number=t.next_find_number(), site_id=self.site.id, season_id=self.templates["records"][1].id,
            trench_id=self.templates["records"][2].id, unit_id=self.units[unit].id, category="artifact",
            material="chert", recovery="plotted", e=1.0, n=1.0, z=round(z, 3), position_source="tape",
            found_at=dt.datetime(2026, 7, 5, 10, tzinfo=TZ), recorder="AK"))
        self.finds.append(f.id)
        self.made |= self._own(i)

    @precondition(lambda self: bool(self.finds))
    @rule(i=st.integers(0, 4), k=st.integers(0, 10**6), unit=st.integers(0, 2), z=st.floats(99.0, 100.0),
          void=st.booleans())
    def edit(self, i: int, k: int, unit: int, z: float, void: bool) -> None:
        t = self.tablets[i]
        fid = self.finds[k % len(self.finds)]
        if not t.list(Find, id=fid):
            return  # this tablet has not seen that find yet
        current = t.get(Find, fid)
        change: dict[str, Any] = {"unit_id": self.units[unit].id, "z": round(z, 3)}
        if void:
            change.update(voided=True, void_reason="double-logged")
        t.put(current.model_copy(update=change))
        self.made |= self._own(i)

    @rule(i=st.integers(0, 4), mode=st.sampled_from(["ok", "ok", "drop_request", "drop_response"]))
    def sync(self, i: int, mode: str) -> None:
        self.faults[i].mode, self.faults[i].left = mode, ATTEMPTS
        try:
            self.clients[i].sync()
        except SyncError:
            pass  # the tablet tries again later

    @rule(i=st.integers(0, 4))
    def resend_a_batch(self, i: int) -> None:
        """A flaky link makes the tablet send its last acknowledged batch again."""
        last = outbox.acked(self.tablets[i])
        if last:
            from schema.sync import batch_hash

            vs = outbox.batch_versions(self.tablets[i], last)
            r = self.clients[i].http.post("/v1/sync/push", headers=self.clients[i].headers,
                                          json={"batch": last, "hash": batch_hash(vs), "versions": [v.model_dump(mode="json") for v in vs]})
            assert r.status_code == 200 and r.json()["replayed"] is True

    @invariant()
    def nothing_half_written(self) -> None:
        if hasattr(self, "tablets"):
            assert self.tablets[0].integrity_check() == "ok"

    def teardown(self) -> None:
        if not hasattr(self, "server"):
            return
        try:
            for _ in range(2):
                for c in self.clients:
                    c.sync()
            assert_converged(self.server, self.tablets, self.made)
        finally:
            for c in self.clients:
                c.http.close()
            for t in self.tablets:
                t.close()
            self.http.__exit__(None, None, None)
            self.server.close()
            shutil.rmtree(self.dir, ignore_errors=True)


class AcksBeforeAnswer(SyncClient):
    """Broken: marks a batch acknowledged before the server's answer arrives (a lost answer loses the batch)."""

    def push(self, report: Any) -> None:
        outbox.cut_batches(self.store, size=self.batch_size)
        for number in outbox.unacked_batches(self.store):
            outbox.mark_acked(self.store, number)
            from schema.sync import batch_hash

            vs = self._batch(number)
            self._call("POST", "/v1/sync/push", json={"batch": number, "hash": batch_hash(vs),
                                                      "versions": [v.model_dump(mode="json") for v in vs]})


class CursorBeforeApply(SyncClient):
    """Broken: moves the pull cursor past a page it then fails to apply."""

    def pull(self, report: Any) -> None:
        from schema.sync.replica import state_get

        with self.store.read() as conn:
            cursor = int(state_get(conn, "cursor", "0") or 0)
        page = self._call("GET", "/v1/sync/pull", params={"after": cursor, "limit": 3})
        with self.store.atomic() as conn:
            state_set(conn, "cursor", page["next"])  # ... and the apply never happens


BROKEN = {"acks_before_answer": AcksBeforeAnswer, "cursor_before_apply": CursorBeforeApply}


@pytest.mark.slow
def test_camp_converges(templates: dict[str, Any]) -> None:
    Camp.templates, Camp.broken = templates, None
    Camp.TestCase.settings = settings(max_examples=EXAMPLES, stateful_step_count=25, deadline=None,
                                      suppress_health_check=list(HealthCheck))
    Camp.TestCase().runTest()


@pytest.mark.slow
@pytest.mark.parametrize(("variant", "fault"), [("acks_before_answer", "drop_request"), ("cursor_before_apply", "ok")])
def test_the_checker_catches_broken_clients(templates: dict[str, Any], variant: str, fault: str) -> None:
    """Each broken client loses data in a two-step scenario; the same checker must report it."""
    for broken, expect_failure in ((None, False), (variant, True)):
        Camp.templates, Camp.broken = templates, broken
        camp = Camp()
        camp.set_up(skews=[0, 3_600_000, -3_600_000, 0, 0])
        camp.new_find(i=1, unit=0, z=99.5)
        camp.sync(i=1, mode=fault)
        camp.sync(i=0, mode="ok")
        if expect_failure:
            with pytest.raises(AssertionError, match="never reached the server|a tablet misses"):
                camp.teardown()
        else:
            camp.teardown()  # the correct client recovers from the same faults
    Camp.broken = None
