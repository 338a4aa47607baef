"""Photos on the tablet: image files kept by their SHA-256, the photo register entry saved after the file is safe,
and the upload of the files the camp server lacks.

Files live in the tablet's photo folder (``photo_folder(store)``: ``<tablet file's name>-photos`` beside it), one
file per hash at ``<folder>/<first two hex digits>/<hash>``. A file is copied to a temporary name in the folder,
flushed to the disk (``fsync``), renamed to its hash and the folder flushed, all before the record that names it
commits: after a power cut the record exists only if its file does (a file without a record is harmless and
``orphans`` lists it).

The upload follows the tus resumable-upload protocol, version 1.0.0 (tus.io/protocols/resumable-upload): the
server says which hashes it lacks (``POST /v1/photos/missing``), the tablet creates the upload (``POST
/v1/photos/uploads`` with ``Upload-Length``; the answer says where it stands, ``Upload-Offset``, as ``HEAD``
would) and sends the rest in chunks (``PATCH`` with ``Content-Type: application/offset+octet-stream`` and the
chunk's ``Upload-Offset``). The server keeps what arrived of a cut chunk, so a cut connection costs only the bytes
in flight; sending again what the server holds changes nothing.

Errors::

    PhotoError (schema.errors)
     +-- NotAnImage        Pillow cannot read the file as an image, or it is cut short
     +-- ImageTooLarge     past MAX_PHOTO_BYTES or MAX_PHOTO_PIXELS
     +-- UploadMismatch    the server found that the bytes do not hash to the photo's SHA-256
"""

from __future__ import annotations

import datetime as dt
import hashlib
import io
import os
import shutil
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from schema import photo_rules
from schema.errors import ImageTooLarge, NotAnImage, PhotoError, RecordNotFound, UploadMismatch
from schema.records import Find, Photo
from schema.records.photo import MAX_PHOTO_BYTES, MAX_PHOTO_PIXELS
from schema.validation import check

__all__ = [
    "CHUNK_BYTES", "ImageFacts", "UploadReport", "android_camera", "copy_from", "free_bytes", "mark_at_camp", "photo_pack_path", "write_photo_pack", "free_space_line", "FREE_SPACE_WARNING_BYTES", "inspect_image", "keep_file", "next_photo_number",
    "follow_photo_hashes", "orphans", "photo_folder", "restore_photo", "void_photo", "photo_path", "save_photo", "strip_location", "thumbnail", "thumbnail_if_kept",
    "THUMB_PIXELS", "upload_photos",
]

CHUNK_BYTES = 8 * 1024 * 1024
"""Bytes sent per PATCH at most (8 MiB; less when the server's body limit is lower). The server keeps what
arrived of a cut chunk, so a cut costs only the bytes in flight; fewer, larger chunks cost fewer requests."""
TUS_VERSION = "1.0.0"
_SEQ_KEY = "photo_seq"
_GPS_IFD = 0x8825  # the EXIF tag that points to the GPS (location) directory (EXIF 2.32, table 4)


@dataclass(frozen=True)
class ImageFacts:
    """What the register needs from an image file."""

    sha256: str
    bytes: int
    width: int
    height: int
    format: str


def photo_folder(store: Any) -> Path:
    """The folder the tablet keeps its photo files in: beside its SQLite file."""
    path = Path(store.path)
    return path.with_name(path.stem + "-photos")


def photo_path(folder: Path, sha256: str) -> Path:
    return folder / sha256[:2] / sha256


def inspect_image(data: bytes, *, name: str = "the file") -> ImageFacts:
    """Check ``data`` is a whole image within the bounds, and measure it (Pillow decodes every pixel once)."""
    from PIL import Image, UnidentifiedImageError

    if len(data) > MAX_PHOTO_BYTES:
        raise ImageTooLarge(f"{name} has {len(data)} bytes, more than {MAX_PHOTO_BYTES // (1024 * 1024)} MiB; "
                            "take the photo at a lower resolution or quality")
    try:
        with Image.open(io.BytesIO(data)) as img:
            width, height, fmt = img.width, img.height, img.format or "unknown"
            if width * height > MAX_PHOTO_PIXELS:
                raise ImageTooLarge(f"{name} is {width} x {height} pixels, more than "
                                    f"{MAX_PHOTO_PIXELS // 1_000_000} megapixels; take it at a lower resolution")
            img.draft("RGB", (256, 256))  # a JPEG decodes scaled down (every coded byte is still read)
            img.load()  # a truncated JPEG fails here
    except Image.DecompressionBombError as exc:
        raise ImageTooLarge(f"{name} has more than {MAX_PHOTO_PIXELS // 1_000_000} megapixels ({exc}); take it at a lower resolution") from None
    except UnidentifiedImageError:
        raise NotAnImage(f"{name} is not an image Baulk can read (no picture format Pillow knows); choose a JPEG or PNG photo") from None
    except OSError as exc:
        raise NotAnImage(f"{name} is not a whole image ({exc}); it may have been cut short while copying: "
                         "take or copy the photo again") from None
    return ImageFacts(hashlib.sha256(data).hexdigest(), len(data), width, height, fmt)


def strip_location(data: bytes) -> bytes:
    """The image without its EXIF location (GPS) tags; the same bytes when it has none.

    Pillow writes the image again: a JPEG keeps its quantisation tables (``quality="keep"``), so the loss is
    the smallest a re-encoding allows."""
    from PIL import Image

    with Image.open(io.BytesIO(data)) as img:
        exif = img.getexif()
        if _GPS_IFD not in exif:
            return data
        del exif[_GPS_IFD]
        out = io.BytesIO()
        options: dict[str, Any] = {"quality": "keep"} if img.format == "JPEG" else {}
        img.save(out, format=img.format, exif=exif.tobytes(), **options)
        return out.getvalue()


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _write_synced(path: Path, data: bytes) -> None:
    """A new file with ``data``, flushed to the disk before this returns."""
    with open(path, "wb") as out:
        out.write(data)
        out.flush()
        os.fsync(out.fileno())


def _rename(source: Path, target: Path) -> None:
    os.replace(source, target)


# keep_file's three disk steps, in order; the power-loss harness (tests/powercut.py) records them by name
FILE_STEPS = ("_write_synced", "_rename", "_fsync_dir")


def keep_file(folder: Path, data: bytes, sha256: str) -> Path:
    """Write ``data`` to its place by hash, durably: temporary name, flush, rename, flush the folder."""
    final = photo_path(folder, sha256)
    if final.exists() and final.stat().st_size == len(data):
        return final  # the same bytes are there already (content-addressed)
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = final.parent / f".{sha256}.{uuid.uuid4().hex}.tmp"
    try:
        _write_synced(tmp, data)
        _rename(tmp, final)
    finally:
        tmp.unlink(missing_ok=True)
    _fsync_dir(final.parent)
    return final


def next_photo_number(store: Any, conn: Any) -> int:
    """The tablet's next photo number (its own sequence, kept in local settings), in the caller's transaction."""
    row = conn.exec_driver_sql("SELECT value FROM local_setting WHERE key = ?", (_SEQ_KEY,)).first()
    number = int(row[0]) + 1 if row else 1
    store.set_setting(_SEQ_KEY, str(number), conn=conn)
    return number


def save_photo(store: Any, *, data: bytes, subject: str, subject_id: uuid.UUID | None, site_id: uuid.UUID,
               by: str, trench_id: uuid.UUID | None = None, caption: str = "", facing: str | None = None,
               scale_in_frame: bool = False, north_arrow_in_frame: bool = False,
               taken_at: dt.datetime | None = None, folder: Path | None = None, name: str = "the photo") -> Photo:
    """Keep an image file and its register entry: the file first (durably), then the record with the next photo
    number in one transaction (for a find, its ``photo_hashes`` gains the hash in the same transaction). Location
    tags are stripped from photos of possible human remains."""
    if subject == "find" and subject_id is not None:
        try:
            found = store.get(Find, subject_id)
        except RecordNotFound:
            raise RecordNotFound(f"no find has id {subject_id}; save the find before photographing it") from None
        if found.human_remains:
            data = strip_location(data)
        trench_id = trench_id or found.trench_id
    facts = inspect_image(data, name=name)
    draft = {"site_id": site_id, "sha256": facts.sha256, "number": 1, "device_id": store.device_id(),
             "subject": subject, "subject_id": subject_id, "trench_id": trench_id, "caption": caption,
             "facing": facing or None, "scale_in_frame": scale_in_frame, "north_arrow_in_frame": north_arrow_in_frame,
             "taken_at": taken_at or dt.datetime.now(dt.timezone.utc), "by": by, "width_px": facts.width,
             "height_px": facts.height, "bytes": facts.bytes}
    check(Photo, draft)  # every field checked before anything is written
    keep_file(folder or photo_folder(store), data, facts.sha256)
    with store.atomic() as conn:
        photo = check(Photo, {**draft, "number": next_photo_number(store, conn)})
        store.save_versioned(conn, photo, new=True)
        if subject == "find" and subject_id is not None:
            _link_to_find(store, conn, subject_id, facts.sha256)
    return photo


def _link_to_find(store: Any, conn: Any, find_id: uuid.UUID, sha256: str) -> None:
    """``Find.photo_hashes`` follows the photo records of the find (exports and sync read it): the new hash is
    added, as one 'add' version of that set field, in the photo record's own transaction."""
    from schema import db

    find = db.get(conn, Find, find_id)
    if sha256 not in find.photo_hashes:
        store.save_versioned(conn, find.model_copy(update={"photo_hashes": [*find.photo_hashes, sha256]}), new=False)


def void_photo(store: Any, photo_id: uuid.UUID, reason: str) -> Photo:
    """Void a photo with a reason (the register keeps it, marked); for a photo of a find, its hash leaves
    ``Find.photo_hashes`` in the same transaction unless another photo of the find that is not voided has the same
    file (``schema.photo_rules``, shared with the camp server). Both are versioned saves, so they sync."""
    with store.atomic() as conn:
        return photo_rules.void_photo(conn, store.save_versioned, photo_id, reason)[0]


def restore_photo(store: Any, photo_id: uuid.UUID, reason: str) -> Photo:
    """Put a voided photo back in force with a reason; a find's ``photo_hashes`` gains its hash again."""
    with store.atomic() as conn:
        return photo_rules.restore_photo(conn, store.save_versioned, photo_id, reason)[0]


def _follow_find(save: Callable[..., None], conn: Any, find_id: uuid.UUID) -> bool:
    """``schema.photo_rules.follow_find`` (kept under its old name)."""
    return photo_rules.follow_find(save, conn, find_id)


follow_photo_hashes = photo_rules.follow_photo_hashes


def orphans(store: Any, folder: Path | None = None) -> list[Path]:
    """Files in the photo folder no photo record names (left by a power cut between file and record)."""
    folder = folder or photo_folder(store)
    named = {p.sha256 for p in store.list(Photo)}
    return sorted(p for p in folder.glob("??/*") if not p.name.startswith(".") and p.name not in named)


THUMB_PIXELS = 256
"""Thumbnails are at most this many pixels a side: one size for the find list and Record, made once per hash."""


def thumbnail(folder: Path, sha256: str, *, size: int = THUMB_PIXELS) -> Path:
    """A PNG thumbnail (EXIF orientation applied, at most ``size`` pixels a side), made once and kept under
    ``<folder>/thumbs/`` (written to a temporary name and renamed: a cut leaves none or a whole one)."""
    from PIL import Image, ImageOps

    out = folder / "thumbs" / f"{sha256}-{size}.png"
    if out.exists():
        return out
    out.parent.mkdir(parents=True, exist_ok=True)
    with Image.open(photo_path(folder, sha256)) as img:
        img.draft("RGB", (size, size))  # a JPEG decodes scaled down (never below the thumbnail's size)
        small = ImageOps.exif_transpose(img)
        small.thumbnail((size, size))
        png = io.BytesIO()
        small.save(png, format="PNG")
    tmp = out.with_suffix(f".{uuid.uuid4().hex}.tmp")
    _write_synced(tmp, png.getvalue())  # flushed before the rename: a cut never leaves an empty thumbnail
    os.replace(tmp, out)
    return out


def thumbnail_if_kept(folder: Path, sha256: str, *, size: int = THUMB_PIXELS) -> Path | None:
    """The photo's thumbnail: the one kept already (made here, or brought by a return bundle for a photo another
    tablet took), else made from the file; None when there is neither, or the file cannot be read."""
    from PIL import UnidentifiedImageError

    try:
        return thumbnail(folder, sha256, size=size)
    except (FileNotFoundError, UnidentifiedImageError):
        return None
    except OSError:  # a damaged file: no thumbnail rather than a broken screen
        return None


def android_camera(folder: Path, on_taken: Callable[[Path | None], None]) -> None:  # pragma: no cover - Android
    """Open the system camera (plyer's camera facade over the platform's capture intent); ``on_taken`` gets the
    picture's path, or None when the user backs out. Untested here: no Android device on these machines."""
    from plyer import camera  # type: ignore[import-not-found]

    folder.mkdir(parents=True, exist_ok=True)
    target = folder / f"camera-{uuid.uuid4().hex}.jpg"

    def done(path: str) -> bool:
        on_taken(Path(path) if path and Path(path).exists() else None)
        return False  # plyer: False keeps the file (we copy it by hash and remove it ourselves)

    camera.take_picture(filename=str(target), on_complete=done)


# -- upload (tus 1.0.0 semantics) --------------------------------------------------------------------------------
@dataclass
class UploadReport:
    """What one photo upload did: photos sent, bytes sent (chunks, counted as sent), photos the server held."""

    sent: list[str] = field(default_factory=list)
    held: int = 0
    bytes_sent: int = 0
    total_bytes: int = 0
    done_bytes: int = 0  # bytes of the photos finished so far (for the progress in total)

    def sentence(self) -> str:
        if not self.sent:
            return f"photos: the camp server holds all {self.held}" if self.held else "photos: none to send"
        return f"photos: {len(self.sent)} sent ({self.bytes_sent / 1e6:.1f} MB), {self.held} held already"


def _headers(token: str, **more: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}", "Tus-Resumable": TUS_VERSION, **more}


def _answer(r: Any, what: str) -> None:
    if r.status_code < 300:
        return
    try:
        body = r.json()
        code, message = body.get("code", ""), body.get("message", r.text)
    except ValueError:
        code, message = "", r.text
    if code == "UploadMismatch":
        raise UploadMismatch(message)
    raise PhotoError(f"{what} was refused by the camp server ({r.status_code}: {message})")


def _send_one(http: Any, token: str, sha: str, path: Path, *, chunk: int, progress: Callable[..., None],
              report: UploadReport, begun: bool = True) -> None:
    length = path.stat().st_size
    where = f"/v1/photos/uploads/{sha}"
    first = b""
    if not begun:  # a new upload: its first chunk rides on the creation request (tus "Creation With Upload")
        with open(path, "rb") as f:
            first = f.read(chunk)
    r = http.post("/v1/photos/uploads", content=first, headers=_headers(token, **{
        "Upload-Length": str(length), "Upload-Metadata": f"sha256 {_b64(sha)}",
        **({"Content-Type": "application/offset+octet-stream"} if first else {})}))
    report.bytes_sent += len(first)
    _answer(r, f"starting the upload of photo {sha[:12]}")
    offset = r.headers.get("Upload-Offset")
    if offset is None:  # a server that answers creation without the offset: ask (tus core, HEAD)
        r = http.head(where, headers=_headers(token))
        _answer(r, f"asking where the upload of photo {sha[:12]} stands")
        offset = r.headers["Upload-Offset"]
    offset = int(offset)
    if first:
        progress(sha, offset, length, report.done_bytes + offset, report.total_bytes)
    with open(path, "rb") as f:
        while offset < length:
            f.seek(offset)
            piece = f.read(chunk)
            r = http.patch(where, content=piece, headers=_headers(token, **{
                "Upload-Offset": str(offset), "Content-Type": "application/offset+octet-stream"}))
            report.bytes_sent += len(piece)
            _answer(r, f"sending photo {sha[:12]} at byte {offset}")
            offset = int(r.headers["Upload-Offset"])
            progress(sha, offset, length, report.done_bytes + offset, report.total_bytes)
    report.done_bytes += length


def _b64(text: str) -> str:
    import base64

    return base64.b64encode(text.encode()).decode()


def upload_photos(store: Any, http: Any, token: str, *, folder: Path | None = None, chunk: int = CHUNK_BYTES,
                  progress: Callable[[str, int, int, int, int], None] | None = None) -> UploadReport:
    """Send the camp server every photo file it lacks (after the versions: it must hold the photo records).

    ``progress(sha256, photo_bytes_done, photo_bytes, all_bytes_done, all_bytes)`` is called after each chunk: per
    photo and in total. Safe to run again at any time: it resumes where an interrupted upload stopped."""
    folder = folder or photo_folder(store)
    mine = sorted({p.sha256 for p in store.list(Photo)})
    report = UploadReport()
    missing: list[str] = []
    begun: dict[str, int] = {}  # uploads the server holds part of: resumed with PATCH, never sent again
    for start in range(0, len(mine), 500):
        r = http.post("/v1/photos/missing", json={"hashes": mine[start:start + 500]}, headers=_headers(token))
        _answer(r, "asking which photos the camp server lacks")
        missing += r.json()["missing"]
        begun.update(r.json().get("begun", {}))
        chunk = min(chunk, int(r.json()["max_chunk_bytes"]) - 4096)  # under the server's body limit
    report.held = len(mine) - len(missing)
    mark_at_camp(store, sorted(set(mine) - set(missing)))
    on_chunk = progress or (lambda *_a: None)
    paths = {sha: photo_path(folder, sha) for sha in missing}
    report.total_bytes = sum(p.stat().st_size for p in paths.values() if p.exists())
    # "at camp" is only a note that saves asking again (the next run asks the server anyway), so it is written
    # every MARK_EVERY photos and when the run ends or fails, not in a commit of its own per photo
    marked = 0
    try:
        for sha, path in paths.items():
            if not path.exists():
                raise PhotoError(f"photo {sha[:12]} has a record but no file in {folder}; it cannot be sent. "
                                 "Void the photo's record if the picture is lost")
            _send_one(http, token, sha, path, chunk=chunk, progress=on_chunk, report=report, begun=sha in begun)
            report.sent.append(sha)
            if len(report.sent) - marked >= MARK_EVERY:
                mark_at_camp(store, report.sent[marked:])
                marked = len(report.sent)
    finally:
        mark_at_camp(store, report.sent[marked:])
    return report


MARK_EVERY = 25


# -- photos by USB: a photo pack beside the bundle ----------------------------------------------------------------
_AT_CAMP = "photo_at_camp:"  # local setting per hash the camp server is known to hold


def mark_at_camp(store: Any, hashes: list[str]) -> None:
    """Remember that the camp server holds these photo files (they leave the next photo pack)."""
    if not hashes:
        return
    with store.atomic() as conn:
        for sha in hashes:
            store.set_setting(_AT_CAMP + sha, "1", conn=conn)


def photo_pack_path(bundle: Path) -> Path:
    """The photo pack that travels beside a bundle file: ``<bundle>.photos.zip``."""
    return bundle.with_name(bundle.name + ".photos.zip")


def write_photo_pack(store: Any, bundle: Path, *, folder: Path | None = None) -> tuple[Path, int] | None:
    """Write the photo files the camp server is not known to hold beside the bundle (a zip of files named by
    their hash, stored as they are; written to a temporary name and renamed). None when there are none."""
    import zipfile

    folder = folder or photo_folder(store)
    with store.read() as conn:
        known = {r[0].removeprefix(_AT_CAMP) for r in conn.exec_driver_sql(
            "SELECT key FROM local_setting WHERE key LIKE ?", (_AT_CAMP + "%",))}
    todo = sorted({p.sha256 for p in store.list(Photo)} - known)
    todo = [sha for sha in todo if photo_path(folder, sha).exists()]
    if not todo:
        return None
    out = photo_pack_path(bundle)
    tmp = out.with_name(out.name + ".part")
    with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_STORED) as z:
        for sha in todo:
            z.write(photo_path(folder, sha), arcname=sha)
    with open(tmp, "rb+") as f:
        os.fsync(f.fileno())
    os.replace(tmp, out)
    return out, len(todo)


def free_bytes(folder: Path) -> int:
    """Free space on the disk that holds the photo folder (for the Camp screen's warning)."""
    probe = folder if folder.exists() else folder.parent
    return shutil.disk_usage(probe).free


FREE_SPACE_WARNING_BYTES = 500 * 1024 * 1024
"""Below this much free space the Camp screen warns (about a hundred phone photos left; our choice)."""


def free_space_line(folder: Path) -> str:
    """Free space for photos, with a warning below ``FREE_SPACE_WARNING_BYTES``."""
    free = free_bytes(folder)
    line = f"Free space for photos: {free / 1e9:.1f} GB"
    if free < FREE_SPACE_WARNING_BYTES:
        line += " - LOW: sync the photos to camp and free space before taking more"
    return line


def copy_from(path: Path) -> bytes:
    """The bytes of a chosen image file (the desktop's file chooser gives a path)."""
    try:
        with open(path, "rb") as f:
            head = f.read(MAX_PHOTO_BYTES + 1)
    except OSError as exc:
        raise NotAnImage(f"cannot read {path}: {exc.strerror}; choose another file") from None
    return head
