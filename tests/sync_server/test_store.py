"""The server store, run on SQLite and (``pg``) on PostgreSQL with the same tests."""

from __future__ import annotations

import threading
import uuid

import pytest
import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from tests.helpers import find_data
from schema.demo_site import DemoSite
from schema.errors import DuplicateRecord, RecordNotFound, StoreError
from schema.records import Device, Find, NumberBlock, Unit
from schema.tables import metadata
from sync_server.store import ServerStore, current_revision, hash_token, head_revision
from sync_server.tables import server_metadata


@pytest.fixture
def server(server_url: str):  # type: ignore[no-untyped-def]
    store = ServerStore.open(server_url)
    yield store
    store.close()


def test_opens_at_the_newest_migration(server: ServerStore) -> None:
    assert current_revision(server.engine) == head_revision()


def test_alembic_schema_matches_the_models(server: ServerStore) -> None:
    with server.engine.connect() as conn:
        ctx = MigrationContext.configure(
            conn, opts={"include_name": lambda name, type_, _p: not (type_ == "table" and name == "alembic_version"),
                        "compare_type": False}
        )
        diffs = [d for d in compare_metadata(ctx, server_metadata) if d[0] not in ("add_table_comment", "modify_comment")]
    assert diffs == []


def test_records_round_trip(server: ServerStore, demo_site: DemoSite) -> None:
    with server.atomic():
        for record in demo_site.setup_records():
            server.add(record)
    find = Find.model_validate(find_data(demo_site))
    server.add(find)
    assert server.get(Find, find.id) == find
    assert server.get(Unit, demo_site.units["203"].id) == demo_site.units["203"]
    assert server.counts()["unit"] == 12


def test_duplicate_code_is_refused(server: ServerStore, demo_site: DemoSite) -> None:
    server.add(demo_site.site)
    with pytest.raises(DuplicateRecord, match="site with code='VLM' already exists"):
        server.add(demo_site.site.model_copy(update={"id": uuid.uuid4()}))


def test_multi_row_write_is_atomic(server: ServerStore, demo_site: DemoSite) -> None:
    with pytest.raises(RecordNotFound):
        with server.atomic():
            server.add(demo_site.site)
            server.add(demo_site.units["101"])  # its trench is not stored: refused
    assert server.counts()["site"] == 0


def test_device_token_is_stored_only_as_a_hash(server: ServerStore) -> None:
    device, token = server.add_device(label="TAB-1", role="recorder")
    assert len(token) >= 40 and device.token_hash == hash_token(token)
    with server.engine.connect() as conn:
        dump = " ".join(str(v) for row in conn.execute(sa.select(metadata.tables["device"])) for v in row)
    assert token not in dump
    assert server.device_for_token(token) == device
    assert server.device_for_token(token + "x") is None


def test_number_blocks_are_never_reissued(server: ServerStore) -> None:
    devices = [server.add_device(label=f"TAB-{i}", role="recorder")[0] for i in range(4)]
    issued: list[NumberBlock] = []
    lock = threading.Lock()

    def take(device: Device) -> None:
        for _ in range(5):
            block = server.issue_number_block(device_id=device.id, size=100)
            with lock:
                issued.append(block)

    threads = [threading.Thread(target=take, args=(d,)) for d in devices]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    spans = sorted((b.first, b.last) for b in issued)
    assert len(spans) == 20
    assert all(a[1] < b[0] for a, b in zip(spans, spans[1:])), "blocks overlap"
    assert spans[0][0] == 1 and spans[-1][1] == 2000


def test_block_for_unknown_device_is_refused(server: ServerStore) -> None:
    with pytest.raises(RecordNotFound, match="no device has id"):
        server.issue_number_block(device_id=uuid.uuid4())


@pytest.mark.parametrize(
    ("url", "message"),
    [
        ("nonsense", "database URL 'nonsense' is not a URL"),
        ("sqlite://", "the server needs a SQLite file, not an in-memory database"),
        ("mysql://x@localhost/db", "database 'mysql' is not supported; use sqlite or postgresql"),
    ],
)
def test_bad_database_url_says_what_to_use(url: str, message: str) -> None:
    with pytest.raises(StoreError, match=message):
        ServerStore.open(url)
