"""Issue 16, "twenty tablets at once": the camp server never resets a connection it could answer, and the tablet
sends a push again when its answer was lost on the way (a push is idempotent by its device, batch and hash).

The reset seen at full size needs a failure before a push's body is read. Here the server's connection pool holds
one connection, which the test keeps busy, so the push's token check cannot get one (as the twenty tablets'
requests could exhaust the default pool under load): the request fails before its body is read. Without
``limits.AnswerErrors`` uvicorn answers 500 and then closes the socket with the unread body in it, so the kernel
sends RST and the tablet sees ``Connection reset by peer`` instead of the answer.
"""

from __future__ import annotations

import select
import socket
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from mobile.sync import SyncClient
from schema.db import sqlite_engine
from schema.records import Find
from sync_server.app import create_app
from sync_server.loopback import serve_in_thread
from tests.helpers import enrolled_tablet, find_data, seeded_server

BIG = 4 * 1024 * 1024  # far more than the socket buffers hold, so most of it is unread when the server answers


def _one_connection_server(tmp_path: Path) -> tuple[Any, Any]:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    server.engine.dispose()
    server.engine = sqlite_engine(tmp_path / "camp.sqlite", pool_size=1, max_overflow=0, pool_timeout=0.3)
    return server, demo


def _still_open(sock: socket.socket) -> bool:
    """Nothing to read and no error pending: the peer neither closed (FIN) nor reset (RST) the connection."""
    ready, _, _ = select.select([sock], [], [], 0)
    if not ready:
        return True
    try:
        return bool(sock.recv(1, socket.MSG_PEEK))
    except ConnectionResetError:
        return False


def test_a_failure_before_the_body_is_read_is_answered_not_reset(tmp_path: Path) -> None:
    server, demo = _one_connection_server(tmp_path)
    tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    with serve_in_thread(create_app(store=server)) as url, httpx.Client(base_url=url, timeout=30) as http:
        SyncClient(tablet, http, token).sync()  # its number block
        held = server.engine.connect()  # the pool's one connection: the token check waits 0.3 s and fails
        try:
            r = http.post("/v1/sync/push", content=b"{" + b" " * BIG, headers={
                "Authorization": f"Bearer {token}", "content-type": "application/json"})
        finally:
            held.close()
        assert r.status_code == 500
        assert r.json()["code"] == "ServerError"
        assert "try again" in r.json()["message"]
        time.sleep(0.3)  # a reset (or a close) would have reached the client's socket by now
        sock = r.extensions["network_stream"].get_extra_info("socket")
        assert _still_open(sock), "the server closed the connection it had answered"
        # the same connection carries the next request (it was drained, not closed)
        tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        report = SyncClient(tablet, http, token).sync()
        assert report.pushed_batches == 1 and report.replayed_batches == 0
        assert http.get("/v1/status").status_code == 200
    assert server.count(Find) == 1
    tablet.close()
    server.close()


class _LoseFirstPushAnswer(httpx.BaseTransport):
    """A real connection to the server whose first push answer is lost on the way back (the server applied it):
    what a reset after the server's answer looks like to the tablet."""

    def __init__(self) -> None:
        self.inner = httpx.HTTPTransport()
        self.lost = 0

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        response = self.inner.handle_request(request)
        if request.url.path == "/v1/sync/push" and self.lost == 0:
            response.read()
            response.close()
            self.lost += 1
            raise httpx.ReadError("[Errno 104] Connection reset by peer", request=request)
        return response

    def close(self) -> None:
        self.inner.close()


def test_a_push_whose_answer_was_lost_is_sent_again_and_applied_once(tmp_path: Path) -> None:
    server, demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    transport = _LoseFirstPushAnswer()
    with serve_in_thread(create_app(store=server)) as url, \
            httpx.Client(base_url=url, timeout=30, transport=transport) as http:
        SyncClient(tablet, http, token).sync()  # its number block
        for _ in range(3):
            tablet.save_find(find=find_data(demo, number=tablet.next_find_number()))
        report = SyncClient(tablet, http, token, retry_wait_s=0.01).sync()
    assert transport.lost == 1
    # the batch reached the server the first time; sent again, it was answered from its stored acknowledgement
    assert report.pushed_batches == 1 and report.replayed_batches == 1 and report.retries == 1
    assert report.acks[0]["applied"] == 0 and report.acks[0]["original"]["applied"] > 0
    assert server.count(Find) == 3
    from mobile.sync import pending_count

    assert pending_count(tablet) == 0
    tablet.close()
    server.close()


def test_a_camp_server_that_stays_silent_is_a_plain_error_after_the_retries(tmp_path: Path) -> None:
    from schema.errors import SyncError
    from sync_server.loopback import free_port

    server, _demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    with httpx.Client(base_url=f"http://127.0.0.1:{free_port()}", timeout=5) as http:  # nothing listens there
        client = SyncClient(tablet, http, token, retry_wait_s=0.01)
        with pytest.raises(SyncError) as exc:
            client.sync()
    assert str(exc.value) == ("the camp server did not answer (ConnectError, tried 3 times); check the Wi-Fi and "
                              "try again, or export a bundle to carry over")
    tablet.close()
    server.close()


def test_a_tablet_gone_mid_push_is_no_server_error(tmp_path: Path, caplog: pytest.LogCaptureFixture) -> None:
    """A tablet switched off (or killed) half-way through a push body: nobody is left to answer, so the camp server
    logs one line and no traceback, and answers the next request as ever."""
    import logging
    from urllib.parse import urlsplit

    server, _demo = seeded_server(f"sqlite:///{tmp_path / 'camp.sqlite'}")
    _tablet, _device, token = enrolled_tablet(server, tmp_path / "t.sqlite", "TAB-1")
    with serve_in_thread(create_app(store=server)) as url, caplog.at_level(logging.INFO, logger="baulk.server"):
        where = urlsplit(url)
        with socket.create_connection((where.hostname, where.port)) as sock:
            sock.sendall(b"POST /v1/sync/push HTTP/1.1\r\nHost: camp\r\nContent-Type: application/json\r\n"
                         b"Authorization: Bearer " + token.encode() + b"\r\nContent-Length: 100000\r\n\r\n{\"batch\": 1")
            time.sleep(0.3)
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and not any("left before" in r.getMessage() for r in caplog.records):
            time.sleep(0.05)
        with httpx.Client(base_url=url, timeout=30) as http:
            assert http.get("/v1/sync/pull", headers={"Authorization": f"Bearer {token}"}).status_code == 200
    mine = [r for r in caplog.records if r.name == "baulk.server"]
    assert any("/v1/sync/push: the client left before its request was read" in r.getMessage() for r in mine)
    assert not [r for r in mine if r.levelno >= logging.ERROR or r.exc_info]
