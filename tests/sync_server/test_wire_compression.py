"""Issue 16, "less traffic": camp Wi-Fi is slow, so sync travels gzip-compressed both ways. The camp server gzips
its answers for a client that asks (``Accept-Encoding: gzip``, as httpx does by itself), the tablet sends its push
bodies with ``Content-Encoding: gzip``, and the server's body limit holds for what a gzip body inflates to, so a
small body that inflates to megabytes (a "zip bomb") is refused, never inflated whole. All over HTTP on a loopback
server, with the tablet's ``SyncClient``. The gzip reference is Python's own ``gzip`` module (RFC 1952)."""

from __future__ import annotations

import gzip
import json
import zlib
from pathlib import Path
from typing import Any

import httpx

from mobile.outbox import batch_versions
from mobile.sync import SyncClient
from schema.records import Find
from sync_server.app import create_app
from sync_server.loopback import serve_in_thread
from sync_server.settings import ServerSettings
from tests.helpers import enrolled_tablet, find_data, seeded_server

LIMIT = 64 * 1024


def _bomb(inflated: int) -> bytes:
    """gzip data of ``inflated`` zero bytes, made a megabyte at a time (the test never holds it inflated)."""
    z = zlib.compressobj(9, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    mb = b"\0" * (1 << 20)
    return b"".join(z.compress(mb) for _ in range(inflated >> 20)) + z.flush()


def test_a_sync_travels_compressed_both_ways_and_arrives_whole(tmp_path: Path) -> None:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    a, _da, token_a = enrolled_tablet(server, tmp_path / "a.sqlite", "TAB-1")
    b, _db, token_b = enrolled_tablet(server, tmp_path / "b.sqlite", "TAB-2")
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        SyncClient(a, http, token_a).sync()
        saved = [a.save_find(find=find_data(demo, number=a.next_find_number())) for _ in range(60)]
        pushed = SyncClient(a, http, token_a).sync()
        assert pushed.pushed_versions > 500 and sum(k["applied"] for k in pushed.acks) == pushed.pushed_versions
        # the push went gzip-compressed: its batches as plain JSON weigh at least 5 times what was sent
        plain_push = sum(len(json.dumps({"batch": ack["batch"], "versions": [
            v.model_dump(mode="json") for v in batch_versions(a, ack["batch"])]})) for ack in pushed.acks)
        assert 0 < pushed.sent_bytes * 5 < plain_push
        assert all(server.get(Find, f.id).number == f.number for f in saved)  # inflated and applied whole

        report = SyncClient(b, http, token_b).sync()  # the set-up and tablet A's finds
        assert report.applied_versions >= pushed.pushed_versions
        assert {f.id for f in saved} <= {f.id for f in b.list(Find)}
        # the same pull asked for plain: the identical JSON, at least 5 times the bytes that came compressed
        auth = {"Authorization": f"Bearer {token_b}"}
        zipped = http.get("/v1/sync/pull", params={"after": 0, "limit": 2000}, headers=auth)
        plain = http.get("/v1/sync/pull", params={"after": 0, "limit": 2000},
                         headers={**auth, "Accept-Encoding": "identity"})
    assert zipped.headers["content-encoding"] == "gzip" and "content-encoding" not in plain.headers
    assert zipped.json()["versions"] == plain.json()["versions"]
    assert plain.num_bytes_downloaded == len(plain.content)
    assert zipped.num_bytes_downloaded * 5 < len(zipped.content)
    # what the tablet counted is what came over the wire, not the JSON it read
    assert report.received_bytes * 5 < len(plain.content)
    a.close()
    b.close()
    server.close()


def test_the_body_limit_holds_for_what_a_gzip_body_inflates_to(tmp_path: Path) -> None:
    server, _demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    _tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    bomb = _bomb(64 << 20)  # 64 MB of zeros in about 64 kB... less: zeros deflate about 1000 to 1
    assert len(bomb) < LIMIT
    head = {"Authorization": f"Bearer {token}", "content-type": "application/json"}
    app = create_app(ServerSettings(max_body_bytes=LIMIT), store=server)
    with serve_in_thread(app) as url, httpx.Client(base_url=url, timeout=30) as http:
        for route in ("/v1/sync/push", "/v1/conflicts/resolve"):
            r = http.post(route, content=bomb, headers={**head, "content-encoding": "gzip"})
            assert r.status_code == 413, r.text
            assert r.json()["code"] == "BodyTooLarge" and "once inflated from gzip" in r.json()["message"]
        # one byte inflated past the limit is refused too; exactly the limit is read (and refused as JSON)
        over = gzip.compress(b" " * (LIMIT + 1))
        at = gzip.compress(b" " * LIMIT)
        assert http.post("/v1/sync/push", content=over, headers={**head, "content-encoding": "gzip"}).status_code == 413
        r = http.post("/v1/sync/push", content=at, headers={**head, "content-encoding": "gzip"})
        assert r.status_code == 422 and r.json()["code"] == "InputInvalid"  # read whole: blank is not a push body
        # compressed data over the limit is refused before inflating
        big = gzip.compress(bytes(range(256)) * 1024, 0)
        assert len(big) > LIMIT
        assert http.post("/v1/sync/push", content=big, headers={**head, "content-encoding": "gzip"}).status_code == 413
        # not gzip, cut short, or another encoding: a clear answer, never a 500
        r = http.post("/v1/sync/push", content=b'{"batch": 1}', headers={**head, "content-encoding": "gzip"})
        assert r.status_code == 400 and "is not gzip data" in r.json()["message"]
        whole = gzip.compress(json.dumps({"batch": 1, "hash": "0" * 64, "versions": []}).encode())
        r = http.post("/v1/sync/push", content=whole[:-6], headers={**head, "content-encoding": "gzip"})
        assert r.status_code == 400 and "ends before its gzip data does" in r.json()["message"]
        r = http.post("/v1/sync/push", content=whole, headers={**head, "content-encoding": "br"})
        assert r.status_code == 415 and r.json()["code"] == "UnsupportedEncoding"
        assert http.get("/v1/status").status_code == 200  # the server is fine after all of it
    server.close()


class _OlderServer:
    """A camp server from before gzip pushes: it ignored ``Content-Encoding`` and read the body as JSON."""

    def __init__(self, app: Any) -> None:
        self.app, self.gzip_seen = app, 0

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] == "http":
            headers = scope.get("headers") or []
            self.gzip_seen += any(k == b"content-encoding" for k, _ in headers)
            scope = {**scope, "headers": [(k, v) for k, v in headers if k != b"content-encoding"]}
        await self.app(scope, receive, send)


def test_a_tablet_pushes_plain_to_a_server_that_cannot_read_gzip(tmp_path: Path) -> None:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    older = _OlderServer(create_app(store=server))
    with serve_in_thread(older) as url, httpx.Client(base_url=url, timeout=30) as http:
        client = SyncClient(tablet, http, token, batch_size=20)
        client.sync()
        finds = [tablet.save_find(find=find_data(demo, number=tablet.next_find_number())) for _ in range(5)]
        report = client.sync()
        assert report.pushed_batches >= 2
        assert older.gzip_seen == 1  # the first batch tried gzip (422: not JSON), then every batch went plain
        assert client.gzip_push is False and report.replayed_batches == 0
    assert all(server.get(Find, f.id).number == f.number for f in finds)
    tablet.close()
    server.close()
