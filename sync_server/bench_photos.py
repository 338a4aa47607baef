"""photos.upload: n photos of about 4 MB from one tablet to a camp server on loopback, with the tus-style upload
(``mobile.photos.upload_photos``: which are missing, create with the first chunk, PATCH chunks of up to 8 MiB,
each chunk hashed while it is flushed, its bytes then dropped from the page cache, and an image-header check at
the end), against the same bytes sent as one plain HTTP PUT each to a route on the same app, behind the same
device check, that streams them to a file and flushes it (goal ratio <= 1.3). Also reports ``resume_sent_share``:
the share of a photo sent again after an upload cut at 90 % (goal: at most the missing 10 % plus one chunk).

In both arms the camp server runs in its own process (uvicorn, the same app with the baseline's route added) and
the tablet's side in the benchmark's: a tablet and a camp server are different machines, and in one process the
client and the server would take turns on one interpreter lock, which charges each arm for the other side's
Python work. Both arms start from the same server, the same connection and an empty folder (the last run's
files removed, untimed).

photos.memory: one photo of about 50 MB to a camp server in its own process: its peak resident memory over idle
while receiving (goal: under idle + 30 MB, the photo streamed, never held whole), against a plain PUT of the same
file, and the bytes a resume sends after a cut at 90 %.

The tablet's side (``mobile.photos``, ``mobile.store``, ``mobile.sync``) is handed in by ``register``, which the
``baulk`` command calls (sync_server modules do not import the tablet's package; DESIGN.md section 1)."""

from __future__ import annotations

import io
import os
import random
import time
from pathlib import Path
from typing import Any

from fastapi import APIRouter, Request, Response

from schema.benchkit import Bench, benchmark
from sync_server.routes.photos import Sha, Uploader

__all__ = ["register"]

_TABLET: dict[str, Any] = {}  # photos, store, sync: the tablet's modules, from register()

PHOTO_SIDE = (2200, 1600)  # noise at JPEG quality 95: about 4 MB a photo


def _photo(k: int) -> bytes:
    from PIL import Image

    img = Image.frombytes("RGB", PHOTO_SIDE, random.Random(k).randbytes(PHOTO_SIDE[0] * PHOTO_SIDE[1] * 3))
    out = io.BytesIO()
    img.save(out, format="JPEG", quality=95)
    return out.getvalue()


def _plain_router(folder: Path) -> Any:
    """The baseline's route, on the same server stack as the photo routes (the same app, middleware and device
    check): ``PUT /bench/plain/<run>/<hash>`` streams the body to a new file and flushes it to the disk, nothing
    else (a new folder per run, as the subject gets a new photo folder per run)."""
    router = APIRouter()
    folder.mkdir()

    @router.put("/bench/plain/{run}/{sha256}", status_code=204, response_class=Response)
    async def plain(request: Request, run: int, sha256: Sha, _device: Uploader) -> Response:
        (folder / str(run)).mkdir(exist_ok=True)
        with open(folder / str(run) / sha256, "wb") as f:
            async for piece in request.stream():
                f.write(piece)
            f.flush()
            os.fsync(f.fileno())
        return Response(status_code=204)

    return router


def _setup(size: int, work: Path) -> dict[str, Any]:
    """A camp server in its own process (``_camp_server``), a tablet synced to it holding ``size`` photos of
    about 4 MB whose records the server holds (the files not yet)."""
    save_photo = _TABLET["photos"].save_photo
    state = _camp_server(work, label="TAB-B")
    tablet, demo = state["tablet"], state["demo"]
    unit = demo.units["101"]
    files = []
    for k in range(size):
        photo = save_photo(tablet, data=_photo(k), subject="unit", subject_id=unit.id, site_id=demo.site.id,
                           by="AK", trench_id=unit.trench_id)
        files.append(photo.sha256)
    _TABLET["sync"].SyncClient(tablet, state["http"], state["token"]).sync()
    return {**state, "files": files}


def _fresh_vault(state: dict[str, Any]) -> Path:
    """The server's photo folder emptied (untimed: the disk holds one run); its path."""
    import shutil

    vault = state["work"] / "vault"
    shutil.rmtree(vault, ignore_errors=True)
    return vault


def _subject(state: dict[str, Any], work: Path, i: int) -> float:
    upload_photos = _TABLET["photos"].upload_photos

    _fresh_vault(state)
    start = time.perf_counter()
    report = upload_photos(state["tablet"], state["http"], state["token"])
    took = time.perf_counter() - start
    assert len(report.sent) == len(state["files"])
    return took


def _baseline(state: dict[str, Any], work: Path, i: int) -> float:
    photo_folder, photo_path = _TABLET["photos"].photo_folder, _TABLET["photos"].photo_path

    import shutil

    folder = photo_folder(state["tablet"])
    auth = {"Authorization": f"Bearer {state['token']}"}
    shutil.rmtree(work / "plain" / str(i - 1), ignore_errors=True)  # as the subject's last folder, untimed
    start = time.perf_counter()
    for sha in state["files"]:
        with open(photo_path(folder, sha), "rb") as f:
            r = state["http"].put(f"/bench/plain/{i}/{sha}", content=f.read(), headers=auth)
        assert r.status_code == 204
    return time.perf_counter() - start


def _after(state: dict[str, Any], work: Path) -> None:
    tab = _TABLET["photos"]
    CHUNK_BYTES, photo_folder, photo_path, upload_photos = (tab.CHUNK_BYTES, tab.photo_folder, tab.photo_path,
                                                            tab.upload_photos)
    try:
        vault = _fresh_vault(state)
        sha, http, token = state["files"][0], state["http"], state["token"]
        data = photo_path(photo_folder(state["tablet"]), sha).read_bytes()
        tus = {"Authorization": f"Bearer {token}", "Tus-Resumable": "1.0.0"}
        import base64

        r = http.post("/v1/photos/uploads", headers={**tus, "Upload-Length": str(len(data)), "Upload-Metadata":
                                                     f"sha256 {base64.b64encode(sha.encode()).decode()}"})
        assert r.status_code == 201, r.text
        cut = len(data) * 9 // 10
        r = http.patch(f"/v1/photos/uploads/{sha}", content=data[:cut], headers={
            **tus, "Upload-Offset": "0", "Content-Type": "application/offset+octet-stream"})
        assert r.status_code == 204, r.text
        for other in state["files"][1:]:  # only the cut one is missing in this vault
            (vault / other[:2]).mkdir(parents=True, exist_ok=True)
            os.link(photo_path(photo_folder(state["tablet"]), other), vault / other[:2] / other)
        report = upload_photos(state["tablet"], http, token)
        state["report"].update({
            "photo_mb": round(len(data) / 1e6, 2),
            "resume_sent_share": round(report.bytes_sent / len(data), 3),
            "resume_goal_share": round(min(1.0, (len(data) - cut + CHUNK_BYTES) / len(data)), 3),
        })
    finally:
        _stop(state)


# -- photos.memory: a 50 MB photo received by a camp server in its own process -----------------------------------
BIG_SIDE = (7000, 6000)  # noise at JPEG quality 95: about 50 MB, 42 megapixels (within MAX_PHOTO_PIXELS)
MEMORY_GOAL_MB = 30  # issue 19: server memory while receiving a 50 MB photo stays under idle + 30 MB

_SERVER = """
import os, sys, threading, time
from pathlib import Path

def _watch(parent=os.getppid()):  # the benchmark that started this server is gone: stop
    while os.getppid() == parent:
        time.sleep(0.5)
    os._exit(0)

threading.Thread(target=_watch, daemon=True).start()
import uvicorn
from sync_server.app import KEEP_ALIVE_S, create_app
from sync_server.bench_photos import _plain_router
from sync_server.settings import ServerSettings
limit = {"max_body_bytes": int(sys.argv[5])} if int(sys.argv[5]) else {}  # 0: the default body limit
app = create_app(ServerSettings(database_url=sys.argv[1], photos_dir=Path(sys.argv[2]), **limit))
app.include_router(_plain_router(Path(sys.argv[3])))
uvicorn.run(app, host="127.0.0.1", port=int(sys.argv[4]), log_level="warning", timeout_keep_alive=KEEP_ALIVE_S)
"""


def _rss_kb(pid: int, field: str) -> int:
    with open(f"/proc/{pid}/status") as fh:
        return next(int(line.split()[1]) for line in fh if line.startswith(field + ":"))


class _PeakRss:
    """The peak resident memory of process ``pid`` while the block runs: its high-water mark (VmHWM) reset first
    through /proc/<pid>/clear_refs (Linux 4.0+), and VmRSS sampled every 2 ms in case the reset is not allowed."""

    def __init__(self, pid: int):
        self.pid, self.peak_kb, self._stop, self._reset = pid, 0, False, False

    def __enter__(self) -> "_PeakRss":
        import threading

        try:
            with open(f"/proc/{self.pid}/clear_refs", "w") as fh:
                fh.write("5")
            self._reset = True
        except OSError:
            self._reset = False
        self._thread = threading.Thread(target=self._sample, daemon=True)
        self._thread.start()
        return self

    def _sample(self) -> None:
        while not self._stop:
            self.peak_kb = max(self.peak_kb, _rss_kb(self.pid, "VmRSS"))
            time.sleep(0.002)

    def __exit__(self, *exc: Any) -> None:
        self._stop = True
        self._thread.join()
        if self._reset:
            self.peak_kb = max(self.peak_kb, _rss_kb(self.pid, "VmHWM"))


def _big_photo(seed: int) -> bytes:
    from PIL import Image

    img = Image.frombytes("RGB", BIG_SIDE, random.Random(seed).randbytes(BIG_SIDE[0] * BIG_SIDE[1] * 3))
    out = io.BytesIO()
    img.save(out, format="JPEG", quality=95)
    return out.getvalue()


def _camp_server(work: Path, *, label: str, max_body_bytes: int | None = None) -> dict[str, Any]:
    """A camp server in its own process (``_SERVER``: the app with the baseline's route, its photo folder
    ``work/vault``) with the demo site's set-up, and a tablet (a recorder, ``label``) synced to it; stopped by
    ``_stop`` (or when the benchmark's process ends)."""
    import subprocess
    import sys

    import httpx

    from schema.demo_site import build_site
    from sync_server.loopback import free_port
    from sync_server.store import ServerStore

    url = f"sqlite:///{work / 'camp.sqlite'}"
    server = ServerStore.open(url)
    demo = build_site()
    with server.atomic():
        for record in demo.setup_records():
            server.add(record)
    device, token = server.add_device(label=label, role="recorder")
    server.issue_number_block(device_id=device.id, size=100)
    server.close()
    port = free_port()
    log = open(work / "server.log", "w")
    proc = subprocess.Popen([sys.executable, "-c", _SERVER, url, str(work / "vault"), str(work / "plain"),
                             str(port), str(max_body_bytes or 0)], stdout=log, stderr=log)
    http = httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=300)
    deadline = time.monotonic() + 60
    while True:
        try:
            if http.get("/v1/status").status_code == 200:
                break
        except httpx.TransportError:
            pass
        if proc.poll() is not None or time.monotonic() > deadline:
            proc.kill()
            raise RuntimeError(f"the camp server did not start: {(work / 'server.log').read_text()[-2000:]}")
        time.sleep(0.1)
    tablet = _TABLET["store"].TabletStore.open(work / "tab.sqlite")
    tablet.set_identity(device=device)
    tablet.set_token(token)
    _TABLET["sync"].SyncClient(tablet, http, token).sync()  # the site's set-up
    return {"proc": proc, "http": http, "tablet": tablet, "token": token, "demo": demo, "work": work,
            "report": {}}


def _stop(state: dict[str, Any]) -> None:
    state["http"].close()
    state["tablet"].close()
    state["proc"].terminate()
    state["proc"].wait(timeout=30)


def _setup_memory(size: int, work: Path) -> dict[str, Any]:
    """A camp server in its own process, a tablet synced to it that has sent one small photo (the server warmed
    up: Pillow and the routes loaded), then the record of a photo of about ``size`` MB (50: its side is fixed)."""
    save_photo, SyncClient = _TABLET["photos"].save_photo, _TABLET["sync"].SyncClient
    # the plain PUT sends the whole photo in one body: let it through the body limit (the tablet's chunks stay 8 MiB)
    state = _camp_server(work, label="TAB-M", max_body_bytes=80 * 1024 * 1024)
    tablet, http, token, demo = state["tablet"], state["http"], state["token"], state["demo"]
    unit = demo.units["101"]
    keep = dict(subject="unit", subject_id=unit.id, site_id=demo.site.id, by="AK", trench_id=unit.trench_id)
    save_photo(tablet, data=_photo(0), **keep)
    SyncClient(tablet, http, token).sync()
    _TABLET["photos"].upload_photos(tablet, http, token)  # the warm-up
    big = save_photo(tablet, data=_big_photo(size), **keep)
    SyncClient(tablet, http, token).sync()
    time.sleep(0.5)
    return {**state, "sha": big.sha256, "bytes": big.bytes, "idle_kb": _rss_kb(state["proc"].pid, "VmRSS"),
            "peaks": {"subject": [], "baseline": []}}


def _forget_big(state: dict[str, Any]) -> None:
    """The server's copy of the big photo removed (the same upload again in the next run)."""
    sha = state["sha"]
    (state["work"] / "vault" / sha[:2] / sha).unlink(missing_ok=True)


def _memory_subject(state: dict[str, Any], work: Path, i: int) -> float:
    _forget_big(state)
    with _PeakRss(state["proc"].pid) as peak:
        start = time.perf_counter()
        report = _TABLET["photos"].upload_photos(state["tablet"], state["http"], state["token"])
        took = time.perf_counter() - start
    assert report.sent == [state["sha"]], report.sent
    state["peaks"]["subject"].append(peak.peak_kb)
    return took


def _memory_baseline(state: dict[str, Any], work: Path, i: int) -> float:
    tab = _TABLET["photos"]
    path = tab.photo_path(tab.photo_folder(state["tablet"]), state["sha"])
    with _PeakRss(state["proc"].pid) as peak:
        start = time.perf_counter()
        with open(path, "rb") as f:
            r = state["http"].put(f"/bench/plain/{i}/{state['sha']}", content=f.read(),
                                  headers={"Authorization": f"Bearer {state['token']}"})
        took = time.perf_counter() - start
    assert r.status_code == 204, r.text
    state["peaks"]["baseline"].append(peak.peak_kb)
    return took


def _memory_after(state: dict[str, Any], work: Path) -> None:
    """Peaks over idle, then the resume: the big photo sent in chunks up to 90 % and cut there, then
    ``upload_photos`` again; the bytes it sends against the goal (the missing 10 % plus one chunk)."""
    import base64

    try:
        idle = state["idle_kb"] / 1024
        report = state["report"]
        report["idle_mb"] = round(idle, 1)
        for tag in ("subject", "baseline"):
            report[f"{tag}_peak_over_idle_mb"] = round(max(state["peaks"][tag]) / 1024 - idle, 1)
        report["goal_over_idle_mb"] = MEMORY_GOAL_MB
        _forget_big(state)
        tab = _TABLET["photos"]
        sha, http, length = state["sha"], state["http"], state["bytes"]
        path = tab.photo_path(tab.photo_folder(state["tablet"]), sha)
        tus = {"Authorization": f"Bearer {state['token']}", "Tus-Resumable": "1.0.0"}
        r = http.post("/v1/photos/uploads", headers={**tus, "Upload-Length": str(length), "Upload-Metadata":
                                                     f"sha256 {base64.b64encode(sha.encode()).decode()}"})
        assert r.status_code == 201, r.text
        cut, offset = length * 9 // 10, 0
        with open(path, "rb") as f:
            while offset < cut:
                piece = f.read(min(tab.CHUNK_BYTES, cut - offset))
                r = http.patch(f"/v1/photos/uploads/{sha}", content=piece, headers={
                    **tus, "Upload-Offset": str(offset), "Content-Type": "application/offset+octet-stream"})
                assert r.status_code == 204, r.text
                offset = int(r.headers["Upload-Offset"])
        resumed = tab.upload_photos(state["tablet"], http, state["token"])
        assert resumed.sent == [sha]
        report["photo_mb"] = round(length / 1e6, 1)
        report["resume_sent_mb"] = round(resumed.bytes_sent / 1e6, 2)
        report["resume_goal_mb"] = round((length - cut + tab.CHUNK_BYTES) / 1e6, 2)
    finally:
        _stop(state)


def register(*, photos: Any, store: Any, sync: Any) -> None:
    """Register photos.upload with the tablet's modules (called by ``baulk bench``)."""
    _TABLET.update(photos=photos, store=store, sync=sync)
    benchmark(Bench(
        name="photos.upload", baseline_name="plain HTTP PUT of the same files", sizes=(10, 200), setup=_setup,
        subject=_subject, baseline=_baseline, repeats=3, after=_after,
        doc="n photos of ~4 MB from one tablet over loopback, resumable chunks (tus semantics) vs one plain PUT "
            "each (goal ratio <= 1.3); reports resume_sent_share after a cut at 90 % (goal <= resume_goal_share)",
    ))
    benchmark(Bench(
        name="photos.memory", baseline_name="plain HTTP PUT of the same file", sizes=(50, 50), setup=_setup_memory,
        subject=_memory_subject, baseline=_memory_baseline, repeats=2, after=_memory_after,
        doc="one photo of ~50 MB to a camp server in its own process, resumable chunks vs one plain PUT; reports "
            "the server's peak memory over idle (goal subject_peak_over_idle_mb <= 30) and the bytes a resume "
            "sends after a cut at 90 % (goal resume_sent_mb <= resume_goal_mb)",
    ))
