"""photos.upload: n photos of about 4 MB from one tablet to a real server on loopback, with the tus-style upload
(``mobile.photos.upload_photos``: which are missing, create, PATCH chunks of up to 8 MiB, hash and image check at
the end), against the same bytes sent as one plain HTTP PUT each to a route that only writes them to a file (goal
ratio <= 1.3). Also reports ``resume_sent_share``: the share of a photo sent again after an upload cut at 90 %
(goal: at most the missing 10 % plus one chunk).

The tablet's side (``mobile.photos``, ``mobile.store``, ``mobile.sync``) is handed in by ``register``, which the
``baulk`` command calls (sync_server modules do not import the tablet's package; DESIGN.md section 1)."""

from __future__ import annotations

import io
import os
import random
import time
from pathlib import Path
from typing import Any

from schema.benchkit import Bench, benchmark

__all__ = ["register"]

_TABLET: dict[str, Any] = {}  # photos, store, sync: the tablet's modules, from register()

PHOTO_SIDE = (2200, 1600)  # noise at JPEG quality 95: about 4 MB a photo


def _photo(k: int) -> bytes:
    from PIL import Image

    img = Image.frombytes("RGB", PHOTO_SIDE, random.Random(k).randbytes(PHOTO_SIDE[0] * PHOTO_SIDE[1] * 3))
    out = io.BytesIO()
    img.save(out, format="JPEG", quality=95)
    return out.getvalue()


def _setup(size: int, work: Path) -> dict[str, Any]:
    import contextlib

    import httpx

    save_photo, SyncClient = _TABLET["photos"].save_photo, _TABLET["sync"].SyncClient
    from schema.demo_site import build_site
    from sync_server.app import create_app
    from sync_server.loopback import serve_in_thread
    from sync_server.store import ServerStore

    server = ServerStore.open(f"sqlite:///{work / 'camp.sqlite'}")
    demo = build_site()
    with server.atomic():
        for record in demo.setup_records():
            server.add(record)
    app = create_app(store=server)

    async def plain(request: Any) -> Any:  # the baseline: the body to a file, nothing else
        from starlette.responses import Response

        with open(work / "plain" / request.path_params["name"], "wb") as f:
            async for piece in request.stream():
                f.write(piece)
            f.flush()
            os.fsync(f.fileno())
        return Response(status_code=204)

    (work / "plain").mkdir()
    app.add_route("/bench/plain/{name}", plain, methods=["PUT"])
    stack = contextlib.ExitStack()
    base = stack.enter_context(serve_in_thread(app))
    http = stack.enter_context(httpx.Client(base_url=base, timeout=120))
    TabletStore = _TABLET["store"].TabletStore

    device, token = server.add_device(label="TAB-B", role="recorder")
    server.issue_number_block(device_id=device.id, size=100)
    tablet = TabletStore.open(work / "tab.sqlite")
    tablet.set_identity(device=device)
    tablet.set_token(token)
    SyncClient(tablet, http, token).sync()
    unit = demo.units["101"]
    files = []
    for k in range(size):
        data = _photo(k)
        photo = save_photo(tablet, data=data, subject="unit", subject_id=unit.id, site_id=demo.site.id, by="AK",
                           trench_id=unit.trench_id)
        files.append(photo.sha256)
    SyncClient(tablet, http, token).sync()
    return {"app": app, "http": http, "tablet": tablet, "token": token, "files": files, "stack": stack,
            "report": {}}


def _fresh_vault(state: dict[str, Any], work: Path, i: int, what: str) -> None:
    from sync_server.photos import PhotoVault

    state["app"].state.photos = PhotoVault(work / f"{what}-{i}")


def _subject(state: dict[str, Any], work: Path, i: int) -> float:
    upload_photos = _TABLET["photos"].upload_photos

    _fresh_vault(state, work, i, "vault")
    start = time.perf_counter()
    report = upload_photos(state["tablet"], state["http"], state["token"])
    took = time.perf_counter() - start
    assert len(report.sent) == len(state["files"])
    return took


def _baseline(state: dict[str, Any], work: Path, i: int) -> float:
    photo_folder, photo_path = _TABLET["photos"].photo_folder, _TABLET["photos"].photo_path

    folder = photo_folder(state["tablet"])
    start = time.perf_counter()
    for sha in state["files"]:
        with open(photo_path(folder, sha), "rb") as f:
            r = state["http"].put(f"/bench/plain/{sha}", content=f.read())
        assert r.status_code == 204
    return time.perf_counter() - start


def _after(state: dict[str, Any], work: Path) -> None:
    tab = _TABLET["photos"]
    CHUNK_BYTES, photo_folder, photo_path, upload_photos = (tab.CHUNK_BYTES, tab.photo_folder, tab.photo_path,
                                                            tab.upload_photos)

    _fresh_vault(state, work, 99, "resume")
    sha, http, token = state["files"][0], state["http"], state["token"]
    data = photo_path(photo_folder(state["tablet"]), sha).read_bytes()
    tus = {"Authorization": f"Bearer {token}", "Tus-Resumable": "1.0.0"}
    import base64

    http.post("/v1/photos/uploads", headers={**tus, "Upload-Length": str(len(data)),
                                             "Upload-Metadata": f"sha256 {base64.b64encode(sha.encode()).decode()}"})
    cut = len(data) * 9 // 10
    http.patch(f"/v1/photos/uploads/{sha}", content=data[:cut], headers={
        **tus, "Upload-Offset": "0", "Content-Type": "application/offset+octet-stream"})
    for other in state["files"][1:]:  # only the cut one is missing in this vault
        state["app"].state.photos.root.joinpath(other[:2]).mkdir(parents=True, exist_ok=True)
        os.link(photo_path(photo_folder(state["tablet"]), other), state["app"].state.photos.path(other))
    report = upload_photos(state["tablet"], http, token)
    state["report"].update({
        "photo_mb": round(len(data) / 1e6, 2),
        "resume_sent_share": round(report.bytes_sent / len(data), 3),
        "resume_goal_share": round(min(1.0, (len(data) - cut + CHUNK_BYTES) / len(data)), 3),
    })
    state["stack"].close()


def register(*, photos: Any, store: Any, sync: Any) -> None:
    """Register photos.upload with the tablet's modules (called by ``baulk bench``)."""
    _TABLET.update(photos=photos, store=store, sync=sync)
    benchmark(Bench(
        name="photos.upload", baseline_name="plain HTTP PUT of the same files", sizes=(10, 200), setup=_setup,
        subject=_subject, baseline=_baseline, repeats=2, after=_after,
        doc="n photos of ~4 MB from one tablet over loopback, resumable chunks (tus semantics) vs one plain PUT "
            "each (goal ratio <= 1.3); reports resume_sent_share after a cut at 90 % (goal <= resume_goal_share)",
    ))
