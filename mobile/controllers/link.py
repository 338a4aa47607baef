"""The camp link: enrol the tablet (a typed code or the scanned line), see what waits to be sent, sync with
progress, and with no Wi-Fi write a bundle to a folder (a USB stick) and read the return bundle the camp wrote
for this tablet. Errors come back as plain words with what to do; the last sync, the last bundle read and the
last error are kept in the tablet file."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import httpx

from schema.errors import BaulkError, EnrolmentRefused, StoreError
from schema.records import Device
from schema.wording import count_words

from ..bundles import ReturnRead, export_bundle, read_return_bundle
from ..enrol import check_address, check_can_enrol, enrol, parse_enrol_line, pinned_context
from ..store import TabletStore
from ..sync import KEEPALIVE_S, MAX_BATCH, MAX_PAGE, Progress, SyncClient, SyncReport, pending_count

__all__ = ["CampLink", "LinkStatus", "HTTP_TIMEOUT_S"]

HTTP_TIMEOUT_S = 60.0  # a push may wait its turn behind other tablets on a busy camp laptop

ClientFactory = Callable[[str, Any], httpx.Client]


def _client(server: str, verify: Any) -> httpx.Client:
    # an idle connection is reused for KEEPALIVE_S at most, well under the camp server's keep-alive, so the
    # tablet never sends on a connection the server is closing (that request would be reset)
    return httpx.Client(base_url=server, timeout=HTTP_TIMEOUT_S, verify=verify if verify is not None else True,
                        limits=httpx.Limits(keepalive_expiry=KEEPALIVE_S))


@dataclass(frozen=True)
class LinkStatus:
    enrolled: bool
    device: str | None
    server: str | None
    pending_versions: int
    numbers_left: int
    last_sync: str | None
    last_error: str | None
    last_bundle: str | None = None
    photos: list[str] = field(default_factory=list)  # the last photo upload and the free space (mobile/photos.py)

    def lines(self) -> list[str]:
        if not self.enrolled:
            return ["Not enrolled: type or scan the code the data manager gives you."]
        return [f"This tablet: {self.device}  ->  {self.server or 'no server address yet'}",
                f"Waiting to be sent: {count_words(self.pending_versions, 'change')}",
                f"Find numbers left: {self.numbers_left}",
                f"Last sync: {self.last_sync or 'never'}",
                *([f"Last bundle from camp: {self.last_bundle}"] if self.last_bundle else []),
                *self.photos,
                *([f"Last problem: {self.last_error}"] if self.last_error else [])]


class CampLink:
    def __init__(self, store: TabletStore, *, client_factory: ClientFactory = _client, batch_size: int = 500,
                 page_size: int = 500):
        """``batch_size``: versions a push batch holds when unsent work is cut into batches (a smaller one
        suits a weak link: each request is shorter, a cut one costs less to send again); ``page_size``:
        versions a pull page asks for."""
        if not 1 <= batch_size <= MAX_BATCH or not 1 <= page_size <= MAX_PAGE:
            raise ValueError(f"batch size {batch_size} and page size {page_size} must be from 1 to {MAX_BATCH} and "
                             f"{MAX_PAGE}: the camp server takes no bigger batch or page")
        self.store, self.client_factory = store, client_factory
        self.batch_size, self.page_size = batch_size, page_size

    def _http(self) -> httpx.Client:
        server = self.store.setting("link.server")
        if not server:
            raise EnrolmentRefused("no camp server address is set; enrol with the code the data manager gives you")
        pin = self.store.setting("link.sha256")
        return self.client_factory(server, pinned_context(server, pin) if pin else None)

    def enrol(self, text: str, *, server: str | None = None) -> Device:
        """Enrol from a scanned ``baulk-enrol:`` line or a typed code (then ``server`` is needed)."""
        check_can_enrol(self.store)  # before anything is sent: an enrolled tablet keeps its code unspent
        got = parse_enrol_line(text)
        if not got["code"].strip():
            raise EnrolmentRefused("no enrolment code was typed; type the code the data manager gives you, or scan it")
        address = (got.get("server") or server or "").strip().rstrip("/")
        if not address:
            raise EnrolmentRefused("the code has no server address; type the camp server's address (e.g. "
                                   "https://192.168.8.10:8765) beside the code")
        address = check_address(address)
        self.store.set_setting("link.server", address)
        self.store.set_setting("link.sha256", got.get("sha256"))
        with self._http() as http:
            return enrol(self.store, http, got["code"])

    def set_server(self, text: str) -> str:
        """Keep the camp server's address (its own setting; Sync and bundles use it). A new address keeps the
        tablet's enrolment and the certificate it trusts: the same camp server, reached another way."""
        address = check_address(text)
        self.store.set_setting("link.server", address)
        return address

    def status(self) -> LinkStatus:
        device = self.store.device_id()
        token = self.store.token()
        pending = pending_count(self.store) if device and token else 0
        return LinkStatus(enrolled=device is not None and token is not None,
                          device=self._label(device), server=self.store.setting("link.server"),
                          pending_versions=pending, numbers_left=self.numbers_left(),
                          last_sync=self.store.setting("link.last_sync"),
                          last_error=self.store.setting("link.last_error"),
                          last_bundle=self.store.setting("link.last_bundle"), photos=self._photo_lines())

    def _photo_lines(self) -> list[str]:
        from ..photos import free_space_line, photo_folder

        last = self.store.setting("link.last_photos")
        return [*([f"Last photo upload: {last}"] if last else []), free_space_line(photo_folder(self.store))]

    def _label(self, device: Any) -> str | None:
        if device is None:
            return None
        found = self.store.list(Device, id=device)
        return found[0].label if found else str(device)[:8]

    def numbers_left(self) -> int:
        return self.store.numbers_left()

    def sync(self, progress: Progress | None = None) -> SyncReport:
        """Push, then pull; the outcome (or the plain-words error) is kept for the status."""
        token = self.store.token()
        if token is None:
            raise EnrolmentRefused("this tablet is not enrolled; enrol it before syncing")
        try:
            with self._http() as http:
                report = SyncClient(self.store, http, token, batch_size=self.batch_size, page_size=self.page_size,
                                    progress=progress).sync()
                # photo files after the versions (the camp needs their records first): mobile/photos.py
                from ..photos import upload_photos

                photos = upload_photos(self.store, http, token, progress=lambda _sha, _d, _t, done, total: (
                    progress("photos", done, total) if progress else None))
                self.store.set_setting("link.last_photos", photos.sentence())
        except BaulkError as exc:
            self.store.set_setting("link.last_error", str(exc))
            raise
        now = dt.datetime.now().astimezone()
        rechecked = report.rechecked
        changed = len(rechecked.now_failing) + len(rechecked.cleared) if rechecked is not None else 0
        self.store.set_setting("link.last_sync", f"{now:%d %b %H:%M}, sent {report.pushed_versions}, "
                                                 f"received {report.applied_versions}"
                               + (f", checks changed on {changed} find{'' if changed == 1 else 's'}" if changed else ""))
        self.store.set_setting("link.last_error", None)
        return report

    def export_bundle(self, folder: Path) -> dict[str, Any]:
        """Everything not yet acknowledged, sealed in one file in ``folder`` (a USB stick) for the data manager."""
        folder = Path(folder)
        if not folder.is_dir():
            raise StoreError(f"the folder {folder} does not exist; plug the stick in and choose its folder")
        return export_bundle(self.store, folder, batch_size=self.batch_size)

    def read_bundle(self, folder_or_file: Path | str) -> ReturnRead:
        """Read the return bundle the camp wrote for this tablet (a file, or the stick's folder: the newest for
        this tablet there): checked whole, then applied as a sync's pull would, once. ``sentence()`` of the answer
        says what came in; a bundle that fails a check changes nothing and the error says why."""
        if not str(folder_or_file).strip():
            raise StoreError("no folder was given; plug the stick in and type its folder (or the bundle file)")
        path = Path(folder_or_file)
        if not path.exists():
            raise StoreError(f"there is no folder or file {path}; plug the stick in and choose its folder")
        read = read_return_bundle(self.store, path)
        if not read.already:
            now = dt.datetime.now().astimezone()
            self.store.set_setting("link.last_bundle", f"{now:%d %b %H:%M}, received {read.applied}")
        return read
