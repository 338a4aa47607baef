"""Photo files at camp: kept by SHA-256 in a folder beside the store, received in resumable chunks.

The register (the ``photo`` records) is in the database like every record; the bytes are files in the photo
folder: ``<folder>/<first two hex digits>/<hash>``, a PNG thumbnail made once under ``<folder>/thumbs/``, and
unfinished uploads under ``<folder>/partial/<hash>.<declared length>``. An upload follows the tus resumable-upload
protocol, version 1.0.0 (tus.io/protocols/resumable-upload, "Core Protocol" and the "Creation" extension): its
offset is the partial file's size (flushed after each chunk, so a restart resumes from what reached the disk), a
chunk must start at that offset or is refused without touching the file (409), and when the last byte arrives
the whole file is hashed and decoded by Pillow before it is renamed into place: a file whose hash is not its name
is deleted and the upload starts again from 0 (``UploadMismatch``); nothing half-received is ever served.

A chunk is written as it arrives (``append`` takes an iterator of pieces): the server never holds a whole photo.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import threading
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Iterator

import platformdirs
import sqlalchemy as sa

from schema.errors import ImageTooLarge, NotAnImage, PhotoError, RecordNotFound, UploadMismatch
from schema.records.photo import MAX_PHOTO_BYTES, MAX_PHOTO_PIXELS
from schema.tables import metadata

__all__ = ["OffsetMismatch", "PhotoVault", "UploadState", "default_photo_dir", "register_rows", "withheld_photo", "import_photo_pack", "vault_for"]


class OffsetMismatch(PhotoError):
    """A chunk that does not start where the upload stands (tus: 409 Conflict, the upload left untouched)."""


def default_photo_dir(database_url: str) -> Path:
    """Beside a SQLite store (``<name>-photos``); in the user data folder for PostgreSQL."""
    url = sa.make_url(database_url)
    if url.get_backend_name() == "sqlite" and url.database and url.database != ":memory:":
        db = Path(url.database)
        return db.with_name(db.stem + "-photos")
    return Path(platformdirs.user_data_dir("baulk", appauthor=False)) / "photos"


@dataclass(frozen=True)
class UploadState:
    """Where an upload stands: bytes received of the declared length (complete: the file is kept)."""

    offset: int
    length: int

    @property
    def complete(self) -> bool:
        return self.offset == self.length


class PhotoVault:
    """The photo folder of one camp store."""

    def __init__(self, root: Path):
        self.root = Path(root)
        self._locks: dict[str, threading.Lock] = {}
        self._guard = threading.Lock()

    # -- where things are ------------------------------------------------------------------------------------
    def path(self, sha: str) -> Path:
        return self.root / sha[:2] / sha

    def has(self, sha: str) -> bool:
        return self.path(sha).is_file()

    def missing(self, hashes: Iterable[str]) -> list[str]:
        return sorted({h for h in hashes if not self.has(h)})

    def _partial(self, sha: str) -> Path | None:
        found = sorted((self.root / "partial").glob(f"{sha}.*"))
        return found[0] if found else None

    def lock(self, sha: str) -> threading.Lock:
        with self._guard:
            return self._locks.setdefault(sha, threading.Lock())

    # -- the upload ------------------------------------------------------------------------------------------
    def state(self, sha: str) -> UploadState:
        """Where the upload of ``sha`` stands; RecordNotFound when none was begun."""
        if self.has(sha):
            size = self.path(sha).stat().st_size
            return UploadState(size, size)
        part = self._partial(sha)
        if part is None:
            raise RecordNotFound(f"no upload of photo {sha} was begun; create it first (POST /v1/photos/uploads)")
        return UploadState(part.stat().st_size, int(part.suffix.lstrip(".")))

    def begin(self, sha: str, length: int) -> UploadState:
        """Create the upload (idempotent: an upload already begun with the same length is kept as it stands)."""
        if not 1 <= length <= MAX_PHOTO_BYTES:
            raise ImageTooLarge(f"an upload of {length} bytes cannot be a photo Baulk keeps (1 byte to "
                                f"{MAX_PHOTO_BYTES // (1024 * 1024)} MiB); check Upload-Length")
        if self.has(sha):
            return self.state(sha)
        with self.lock(sha):
            part = self._partial(sha)
            if part is not None and int(part.suffix.lstrip(".")) != length:
                part.unlink()  # a different length for the same hash: one of them is wrong; start again
                part = None
            if part is None:
                part = self.root / "partial" / f"{sha}.{length}"
                part.parent.mkdir(parents=True, exist_ok=True)
                part.touch()
            return UploadState(part.stat().st_size, length)

    def append(self, sha: str, offset: int, pieces: Iterable[bytes]) -> UploadState:
        """Write a chunk that starts at ``offset``; finish the upload when its last byte arrives."""
        with self.receiving(sha, offset) as chunk:
            for piece in pieces:
                chunk.write(piece)
        return self.finish(sha, chunk.state())

    @contextlib.contextmanager
    def receiving(self, sha: str, offset: int) -> Iterator["Chunk"]:
        """A chunk being received at ``offset``: pieces written as they come, flushed to the disk at the end
        (also when the connection is cut: tus, "Servers SHOULD always attempt to process partial message
        bodies"). One chunk per photo at a time: a second one meanwhile is refused, never waited for."""
        lock = self.lock(sha)
        if not lock.acquire(blocking=False):
            raise OffsetMismatch(f"another chunk of photo {sha} is being received; ask with HEAD where the "
                                 "upload stands once it ends")
        try:
            state = self.state(sha)
            if state.complete and offset == state.length:
                yield Chunk(None, state)  # the last chunk sent again after its answer was lost: nothing to do
                return
            if state.complete or offset != state.offset:
                raise OffsetMismatch(f"the upload of photo {sha} stands at byte {state.offset}, not {offset}; "
                                     "ask with HEAD and send from there")
            part = self._partial(sha)
            assert part is not None
            with open(part, "ab") as out:
                chunk = Chunk(out, state)
                try:
                    yield chunk
                finally:
                    out.flush()
                    os.fsync(out.fileno())
        finally:
            lock.release()

    def finish(self, sha: str, state: UploadState) -> UploadState:
        """Keep the photo once every byte is in (hash and image checked); otherwise where the upload stands."""
        if not state.complete or self.has(sha):
            return state
        with self.lock(sha):
            part = self._partial(sha)
            if part is None:  # finished by a concurrent request meanwhile
                return self.state(sha)
            return self._finish(sha, part)

    def _finish(self, sha: str, part: Path) -> UploadState:
        digest = hashlib.sha256()
        with open(part, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                digest.update(block)
        if digest.hexdigest() != sha:
            part.unlink()
            raise UploadMismatch(f"the bytes received hash to {digest.hexdigest()}, not to photo {sha}; the upload "
                                 "was discarded: send the photo again from byte 0")
        try:
            check_image(part, name=f"photo {sha}", thumb=self._thumb(sha))
        except PhotoError:
            part.unlink()
            raise
        final = self.path(sha)
        final.parent.mkdir(parents=True, exist_ok=True)
        os.replace(part, final)
        _fsync_dir(final.parent)
        size = final.stat().st_size
        return UploadState(size, size)

    # -- reading ---------------------------------------------------------------------------------------------
    def _thumb(self, sha: str, size: int = 320) -> Path:
        return self.root / "thumbs" / f"{sha}-{size}.png"

    def thumbnail(self, sha: str, *, size: int = 320) -> Path:
        """A PNG thumbnail, EXIF orientation applied (Pillow); made when the photo is kept, or again here."""
        out = self._thumb(sha, size)
        if not out.exists():
            check_image(self.path(sha), name=f"photo {sha}", thumb=out, size=size)
        return out


def _save_thumb(img: Any, out: Path, size: int) -> None:
    small = img.copy()
    small.thumbnail((size, size))
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{uuid.uuid4().hex}.tmp")
    small.save(tmp, format="PNG")
    os.replace(tmp, out)


class Chunk:
    """The chunk being received: ``write`` refuses bytes past the declared length."""

    def __init__(self, out: Any, start: UploadState):
        self._out, self._start, self.written = out, start, 0

    def write(self, piece: bytes) -> None:
        if self._out is None:
            return
        if self._start.offset + self.written + len(piece) > self._start.length:
            raise OffsetMismatch(f"the chunk runs past the declared length ({self._start.length} bytes); send only "
                                 "the bytes of the photo")
        self._out.write(piece)
        self.written += len(piece)

    def state(self) -> UploadState:
        return UploadState(self._start.offset + self.written, self._start.length)


def check_image(path: Path, *, name: str, thumb: Path | None = None, size: int = 320) -> tuple[int, int, str]:
    """Decode an image file with Pillow to its last byte (a truncated JPEG fails); its width, height and format.
    A JPEG is decoded scaled down to no less than ``size`` (libjpeg's DCT scaling still reads every coded byte);
    with ``thumb``, that small image becomes the PNG thumbnail (EXIF orientation applied)."""
    from PIL import Image, ImageOps, UnidentifiedImageError

    try:
        with Image.open(path) as img:
            width, height, fmt = img.width, img.height, img.format or "unknown"
            if width * height > MAX_PHOTO_PIXELS:
                raise ImageTooLarge(f"{name} is {width} x {height} pixels, more than "
                                    f"{MAX_PHOTO_PIXELS // 1_000_000} megapixels; it was not kept")
            img.draft("RGB", (size, size))  # JPEG: scaled while decoded, no smaller than the thumbnail
            img.load()
            if thumb is not None:
                _save_thumb(ImageOps.exif_transpose(img), thumb, size)
            return width, height, fmt
    except Image.DecompressionBombError as exc:
        raise ImageTooLarge(f"{name} has more than {MAX_PHOTO_PIXELS // 1_000_000} megapixels ({exc}); it was not kept") from None
    except UnidentifiedImageError:
        raise NotAnImage(f"{name} is not an image Baulk can read (no picture format Pillow knows); it was not kept") from None
    except OSError as exc:
        raise NotAnImage(f"{name} is not a whole image ({exc}); it was not kept: send it again") from None


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def vault_for(store: Any) -> PhotoVault:
    """The photo folder of a store opened by a command (``BAULK_SERVER_PHOTOS_DIR``, else beside the store)."""
    from .settings import ServerSettings

    return PhotoVault(ServerSettings().photos_dir or default_photo_dir(store.url))


def import_photo_pack(store: Any, vault: PhotoVault, bundle: Path) -> dict[str, Any]:
    """Keep the photo files of the pack beside ``bundle`` (``<bundle>.photos.zip``), each checked as an upload is
    (its name is its hash, a photo record must name it, then hash and image checks before it is kept); a file that
    fails is reported and left out, the others are kept. Nothing when there is no pack."""
    import zipfile

    pack = bundle.with_name(bundle.name + ".photos.zip")
    kept, held, refused = 0, 0, []
    if not pack.exists():
        return {"kept": 0, "held": 0, "refused": []}
    photo = metadata.tables["photo"]
    with zipfile.ZipFile(pack) as z:
        for info in z.infolist():
            sha = info.filename
            if len(sha) != 64 or any(c not in "0123456789abcdef" for c in sha):
                refused.append(f"{sha[:80]}: not a photo file name (its SHA-256)")
                continue
            if vault.has(sha):
                held += 1
                continue
            with store.read() as conn:
                named = conn.execute(sa.select(photo.c.id).where(photo.c.sha256 == sha).limit(1)).first()
            if named is None or not 1 <= info.file_size <= MAX_PHOTO_BYTES:
                refused.append(f"{sha}: no photo record names it, or its size ({info.file_size} bytes) is out of "
                               "bounds")
                continue
            try:
                start = vault.begin(sha, info.file_size).offset  # a pack read before in part: resume there
                with z.open(info) as src, vault.receiving(sha, start) as chunk:
                    src.read(start)
                    for block in iter(lambda: src.read(1 << 20), b""):
                        chunk.write(block)
                vault.finish(sha, chunk.state())
                kept += 1
            except (PhotoError, zipfile.BadZipFile, OSError) as exc:
                refused.append(f"{sha}: {exc}")
    return {"kept": kept, "held": held, "refused": refused}


def withheld_photo(conn: sa.Connection, sha: str, role: str) -> bool:
    """Whether ``role`` may not see the photo file ``sha``: a photo of possible human remains is withheld as
    their positions are (``schema.withholding``: only recorders, managers and the server see them)."""
    from schema.withholding import SEES_POSITIONS

    if role in SEES_POSITIONS:
        return False
    photo, find = metadata.tables["photo"], metadata.tables["find"]
    q = (sa.select(find.c.id).select_from(photo.join(find, find.c.id == photo.c.subject_id))
         .where(photo.c.sha256 == sha, photo.c.subject == "find", find.c.human_remains.is_(True)).limit(1))
    return conn.execute(q).first() is not None


def register_rows(conn: sa.Connection, *, subject_ids: Iterable[uuid.UUID] | None = None) -> list[dict[str, Any]]:
    """The photo register (not voided), oldest first, with the taking device's label and whether it shows a
    find flagged as possible human remains; optionally for some subjects only."""
    photo, device, find = metadata.tables["photo"], metadata.tables["device"], metadata.tables["find"]
    q = (sa.select(photo, device.c.label.label("device_label"),
                   sa.func.coalesce(find.c.human_remains, False).label("human_remains"))
         .select_from(photo.outerjoin(device, device.c.id == photo.c.device_id)
                      .outerjoin(find, (photo.c.subject == "find") & (find.c.id == photo.c.subject_id)))
         .where(photo.c.voided.is_(False)).order_by(photo.c.taken_at, photo.c.number))
    if subject_ids is not None:
        q = q.where(photo.c.subject_id.in_(list(subject_ids)))
    return [dict(r._mapping) for r in conn.execute(q)]
