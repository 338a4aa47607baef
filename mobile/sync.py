"""The tablet's sync client: push unsent batches, pull the change log after the cursor (no Kivy here).

It talks to the server through any ``httpx.Client`` (a real one on the camp Wi-Fi, or a test client wrapping
the app in process). Unsent versions are cut into numbered batches once and stored, so a retry after a cut
connection re-sends the very same batch (the server then answers with its stored acknowledgement); so a request
whose connection dropped (reset, refused, cut) is sent again at once, up to ``ATTEMPTS`` times, and counted in
``SyncReport.retries``: a push again is applied once, a pull again moves nothing until its page is applied. A pulled
page and the new cursor are applied in one local transaction. Camp Wi-Fi is slow, so both directions travel
gzip-compressed: a push body is sent with ``Content-Encoding: gzip`` (sent again plain, and plain from then on
when the server refuses that, 415, or cannot read it, 422: a server older than this), and the server gzips its
answers since httpx asks for that by itself; ``SyncReport.sent_bytes`` and ``received_bytes`` count the bodies as
they went on the wire. Every reply carries the server's clock; the tablet keeps the offset and its own stamps
follow it.
"""

from __future__ import annotations

import gzip
import json
import time
from dataclasses import dataclass, field
from typing import Any, Callable

import httpx
import sqlalchemy as sa
from sqlalchemy.engine import Connection

from schema.errors import SyncError
from schema.sync import Version, batch_hash
from schema.sync.versions import check_version_ids
from schema.sync.replica import insert_versions, load_identity, materialize, retry_pending, state_get, state_set
from schema.sync.tables import field_version

from . import outbox
from .store import TabletStore

__all__ = ["Progress", "SyncClient", "SyncReport", "apply_page", "cursor_of", "pending_count"]

Progress = Callable[[str, int, int], None]
MAX_BATCH = 5000  # the largest push batch the camp server takes (sync_server.sync.MAX_BATCH)
MAX_PAGE = 2000  # the largest pull page it serves (sync_server.sync.MAX_PAGE)
ATTEMPTS = 3  # a request whose connection dropped is sent this many times in all before the sync gives up
GZIP_LEVEL = 5  # as the camp server's answers (sync_server.limits.COMPRESS_ANSWERS): a 500-version batch ~13x smaller
KEEPALIVE_S = 5.0  # how long an idle connection is reused: well under the camp server's (sync_server.app.KEEP_ALIVE_S)


@dataclass
class SyncReport:
    pushed_batches: int = 0
    pushed_versions: int = 0
    replayed_batches: int = 0
    pulled_versions: int = 0
    applied_versions: int = 0
    conflicts_open: int | None = None
    clock_offset_ms: int | None = None
    acks: list[dict[str, Any]] = field(default_factory=list)
    # versions the server would not take from this device (set-up records only a manager writes), with the
    # server's reason; acknowledged with their batch, so they are never sent again
    refused: list[dict[str, Any]] = field(default_factory=list)
    retries: int = 0  # requests sent again after their connection dropped
    sent_bytes: int = 0  # request bodies as sent on the wire (push bodies gzip-compressed)
    received_bytes: int = 0  # answer bodies as they came over the wire (gzip-compressed by the server)
    # the live checks run again once a pull brought changes they read (mobile.checks.recheck_arrived); None: no
    # such change came (nothing, or only number blocks, photos, a find's notes, ...)
    rechecked: Any = None


def apply_page(conn: Connection, versions: list[Version], next_cursor: int) -> list[Version]:
    """Apply one page of the camp's change log in the caller's transaction: the versions not held yet are
    inserted, their records' rows rebuilt, rows waiting for them retried, the clock moved past every stamp, and
    the cursor moved to ``next_cursor`` (never back: a page read again changes nothing). Returns the versions
    that were new here. A pull and a return bundle (``mobile.bundles``) apply their pages through it; the caller
    checks the versions' ids first (``check_version_ids``)."""
    ident = load_identity(conn)
    for v in versions:
        ident.clock.observe(v.stamp)
    new = insert_versions(conn, versions)
    materialize(conn, {(v.record, v.record_id) for v in new}, known=new)
    retry_pending(conn)
    state_set(conn, "cursor", max(cursor_of(conn), next_cursor))
    state_set(conn, "hlc_wall", ident.clock.last.wall_ms)
    state_set(conn, "hlc_counter", ident.clock.last.counter)
    return new


def cursor_of(conn: Connection) -> int:
    """The camp change-log position this tablet has applied everything up to (0: nothing yet)."""
    return int(state_get(conn, "cursor", "0") or 0)


def pending_count(store: TabletStore) -> int:
    """This tablet's own versions not yet acknowledged by the server."""
    with store.read() as conn:
        me = load_identity(conn).device
        acked = int(state_get(conn, "acked_batch", "0") or 0)
        q = sa.select(sa.func.count()).select_from(field_version).where(
            field_version.c.device == me, sa.or_(field_version.c.batch.is_(None), field_version.c.batch > acked))
        return int(conn.execute(q).scalar_one())


class SyncClient:
    def __init__(self, store: TabletStore, http: httpx.Client, token: str, *, batch_size: int = 500,
                 page_size: int = 500, progress: Progress | None = None, retry_wait_s: float = 0.5):
        self.store, self.http, self.batch_size, self.page_size = store, http, batch_size, page_size
        self.retry_wait_s = retry_wait_s
        self.headers = {"Authorization": f"Bearer {token}"}
        self.progress = progress or (lambda _stage, _done, _total: None)
        self._offset: int | None = None
        self.gzip_push = True  # False once the server has refused a compressed push (an older server)

    # -- batches ------------------------------------------------------------------------------------------
    def pending_count(self) -> int:
        """Own versions not yet acknowledged by the server."""
        return pending_count(self.store)

    def _batch(self, number: int) -> list[Version]:
        return outbox.batch_versions(self.store, number)

    # -- wire -----------------------------------------------------------------------------------------------
    def _send(self, method: str, url: str, report: SyncReport | None, **kw: Any) -> httpx.Response:
        """The request, sent again when its connection dropped (both kinds are safe to repeat: a push is
        answered once per batch, a pull reads without changing anything)."""
        headers = {**self.headers, **kw.pop("headers", {})}
        for attempt in range(1, ATTEMPTS + 1):
            try:
                r = self.http.request(method, url, headers=headers, **kw)
                if report is not None:
                    report.sent_bytes += len(r.request.content)
                    report.received_bytes += r.num_bytes_downloaded
                return r
            except httpx.TransportError as exc:
                if attempt == ATTEMPTS:
                    raise SyncError(f"the camp server did not answer ({type(exc).__name__}, tried {ATTEMPTS} times); "
                                    "check the Wi-Fi and try again, or export a bundle to carry over") from None
                if report is not None:
                    report.retries += 1
                time.sleep(self.retry_wait_s * attempt)
        raise AssertionError("unreachable")

    def _call(self, method: str, url: str, report: SyncReport | None = None, **kw: Any) -> dict[str, Any]:
        sent = time.time_ns() // 1_000_000
        return self._answer(self._send(method, url, report, **kw), sent)

    def _push_call(self, body: dict[str, Any], report: SyncReport) -> dict[str, Any]:
        """POST one batch, gzip-compressed unless this server could not take that."""
        data = json.dumps(body, separators=(",", ":"), ensure_ascii=False).encode()
        plain = {"content-type": "application/json"}
        sent = time.time_ns() // 1_000_000
        if self.gzip_push:
            r = self._send("POST", "/v1/sync/push", report, content=gzip.compress(data, GZIP_LEVEL),
                           headers={**plain, "content-encoding": "gzip"})
            if r.status_code not in (415, 422):
                return self._answer(r, sent)
        r = self._send("POST", "/v1/sync/push", report, content=data, headers=plain)
        if r.status_code < 400:  # taken plain, not compressed (415 refused; 422 read as broken JSON): an older server
            self.gzip_push = False
        return self._answer(r, sent)

    def _answer(self, r: httpx.Response, sent: int) -> dict[str, Any]:
        if r.status_code >= 400:
            try:
                body = r.json()
                detail = body.get("message") or body.get("detail") or r.text
            except ValueError:
                detail = r.text[:200]
            raise SyncError(f"the camp server refused the sync ({r.status_code}): {str(detail)[:300]}")
        body = r.json()
        if "server_time_ms" in body:
            got = time.time_ns() // 1_000_000
            self._offset = int(body["server_time_ms"] - (sent + got) / 2)
        return body

    # -- the two halves -------------------------------------------------------------------------------------
    def push(self, report: SyncReport) -> None:
        outbox.cut_batches(self.store, size=self.batch_size)
        todo = outbox.unacked_batches(self.store)
        for k, number in enumerate(todo, start=1):
            versions = self._batch(number)
            body = {"batch": number, "hash": batch_hash(versions), "versions": [v.model_dump(mode="json") for v in versions]}
            ack = self._push_call(body, report)
            outbox.mark_acked(self.store, number)
            report.pushed_batches += 1
            report.pushed_versions += len(versions)
            report.replayed_batches += int(bool(ack.get("replayed")))
            report.conflicts_open = ack.get("conflicts_open")
            report.acks.append(ack)
            report.refused.extend(ack.get("refused") or [])
            self.progress("push", k, len(todo))

    def pull(self, report: SyncReport) -> None:
        touched: set[tuple[str, str]] = set()  # (record, field) of every version new here
        while True:
            with self.store.read() as conn:
                cursor = cursor_of(conn)
            page = self._call("GET", "/v1/sync/pull", report, params={"after": cursor, "limit": self.page_size})
            versions = [Version.model_validate(v, strict=False) for v in page["versions"]]
            check_version_ids(versions, where=f"the camp server's page of changes after {cursor}", fix=(
                "A version is named by the device that made it, so the camp server holds a version it should have "
                "refused; update Baulk on the camp server, then sync again."))
            with self.store.atomic() as conn:
                new = apply_page(conn, versions, page["next"])
            report.pulled_versions += len(versions)
            report.applied_versions += len(new)
            touched.update((v.record, v.field) for v in new)
            self.progress("pull", report.pulled_versions, report.pulled_versions + (self.page_size if page["more"] else 0))
            if not page["more"]:
                break
        if report.applied_versions:  # a correction, a resolution, another tablet's levels may open or close checks
            from .checks import recheck_arrived

            report.rechecked = recheck_arrived(self.store, touched)  # None: nothing the checks read came

    def sync(self) -> SyncReport:
        """Push everything unsent, then pull everything new; keeps the server clock offset."""
        report = SyncReport()
        self._offset = None
        try:
            self.push(report)
            self.pull(report)
        finally:
            if self._offset is not None:
                with self.store.atomic() as conn:
                    state_set(conn, "clock_offset_ms", self._offset)
                report.clock_offset_ms = self._offset
        return report
