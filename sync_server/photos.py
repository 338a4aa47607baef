"""Photo files at camp: kept by SHA-256 in a folder beside the store, received in resumable chunks.

The register (the ``photo`` records) is in the database like every record; the bytes are files in the photo
folder: ``<folder>/<first two hex digits>/<hash>``, a PNG thumbnail made once, when first asked for, under
``<folder>/thumbs/``, and unfinished uploads under ``<folder>/partial/<hash>.<declared length>``. An upload follows
the tus resumable-upload protocol, version 1.0.0 (tus.io/protocols/resumable-upload, "Core Protocol" and the
"Creation" extension): its offset is the partial file's size (flushed after each chunk, so a restart resumes from
what reached the disk), a chunk must start at that offset or is refused without touching the file (409), and when
the last byte arrives the file is checked before it is renamed into place: a file whose hash is not its name is
deleted and the upload starts again from 0 (``UploadMismatch``); a file that is not an image, is cut short or has
too many pixels is deleted (``NotAnImage``, ``ImageTooLarge``); nothing half-received is ever served.

The checks are cheap so that an upload costs about what a plain one does: each piece of the request body is
written to the partial file as it comes; when the chunk ends, its bytes are read back (from the page cache) and fed
to the upload's running SHA-256 while another thread waits for them to reach the disk (the flush is a wait, not
work: the hash is taken in its shadow; hashlib and ``os.fsync`` both let go of the GIL). The running hash is kept
per upload with the offset it covers; the partial file is hashed again only when the server lost it, e.g. after a
restart. The image is judged by its header (Pillow opens it
without decoding the pixels: format and pixel size) and its structure (a JPEG must end its scan with the EOI
marker, a PNG with its IEND chunk; other formats are decoded whole, in a worker thread). A chunk is written as it
arrives (``append`` takes an iterator of pieces): the server never holds a whole photo; once flushed, its bytes
leave the system's page cache (``_leave_cache``).
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import threading
import uuid
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Iterator

import platformdirs
import sqlalchemy as sa

from schema.errors import ImageTooLarge, NotAnImage, PhotoError, RecordNotFound, UploadMismatch
from schema.records.photo import MAX_PHOTO_BYTES, MAX_PHOTO_PIXELS
from schema.tables import metadata

__all__ = ["OffsetMismatch", "PhotoVault", "UploadState", "default_photo_dir", "photo_dir", "register_rows", "withheld_photo", "import_photo_pack", "vault_for"]


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
        self._digests: dict[str, tuple[int, Any]] = {}  # sha -> (bytes covered, running SHA-256 of them)

    # -- where things are ------------------------------------------------------------------------------------
    def path(self, sha: str) -> Path:
        return self.root / sha[:2] / sha

    def has(self, sha: str) -> bool:
        return self.path(sha).is_file()

    def missing(self, hashes: Iterable[str]) -> list[str]:
        return sorted({h for h in hashes if not self.has(h)})

    def begun(self, hashes: Iterable[str]) -> dict[str, int]:
        """Of these hashes, the uploads begun and not finished: hash -> bytes held."""
        wanted = set(hashes)
        folder = self.root / "partial"
        names = sorted(os.listdir(folder)) if folder.is_dir() else []
        return {name.partition(".")[0]: (folder / name).stat().st_size for name in names
                if name.partition(".")[0] in wanted}

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
        state = self._begin(sha, length, wait=True)
        assert state is not None
        return state

    def begin_now(self, sha: str, length: int) -> UploadState | None:
        """``begin`` without waiting (the event loop's own call: a few file-system calls); None when another
        request holds the photo meanwhile (then call ``begin`` in a worker thread)."""
        return self._begin(sha, length, wait=False)

    def _begin(self, sha: str, length: int, *, wait: bool) -> UploadState | None:
        if not 1 <= length <= MAX_PHOTO_BYTES:
            raise ImageTooLarge(f"an upload of {length} bytes cannot be a photo Baulk keeps (1 byte to "
                                f"{MAX_PHOTO_BYTES // (1024 * 1024)} MiB); check Upload-Length")
        if self.has(sha):
            return self.state(sha)
        lock = self.lock(sha)
        if not lock.acquire(blocking=wait):
            return None
        try:
            part = self._partial(sha)
            if part is not None and int(part.suffix.lstrip(".")) != length:
                part.unlink()  # a different length for the same hash: one of them is wrong; start again
                self._digests.pop(sha, None)
                part = None
            if part is None:
                part = self.root / "partial" / f"{sha}.{length}"
                part.parent.mkdir(parents=True, exist_ok=True)
                part.touch()
            return UploadState(part.stat().st_size, length)
        finally:
            lock.release()

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
            digest = self._digest(sha, part, state.offset)
            with open(part, "ab") as out:
                chunk = Chunk(out, state)
                try:
                    yield chunk
                finally:
                    out.flush()
                    synced = _FLUSHER.submit(os.fsync, out.fileno())
                    try:
                        _hash_range(part, state.offset, chunk.written, digest)  # in the flush's shadow
                    finally:
                        synced.result()
                    _leave_cache(out.fileno())
                    self._digests[sha] = (chunk.state().offset, digest)
        finally:
            lock.release()

    def _digest(self, sha: str, part: Path, offset: int) -> Any:
        """The running SHA-256 of the first ``offset`` bytes: the one kept from the last chunk, or (after a
        restart, or a chunk whose end did not reach the disk) the partial file hashed again."""
        kept = self._digests.pop(sha, None)
        if kept is not None and kept[0] == offset:
            return kept[1]
        digest = hashlib.sha256()
        with open(part, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                digest.update(block)
        return digest

    QUICK_FINISH_BYTES = 32 * 1024 * 1024
    """A complete JPEG or PNG up to this size whose running hash covers every byte is finished where its last
    chunk was received (``finish_now``): what is left is the header and end-marker check and a rename."""

    def finish_now(self, sha: str, state: UploadState) -> UploadState | None:
        """``finish``, when it is cheap enough for the event loop that received the last chunk: not complete, or
        complete with the running hash of every byte at hand, a JPEG or PNG (judged without decoding) of at most
        ``QUICK_FINISH_BYTES``, and no other request holding the photo. None otherwise: call ``finish`` in a
        worker thread (it may hash the whole file again, or decode an image of another format)."""
        if not state.complete:
            return state
        kept = self._digests.get(sha)
        if kept is None or kept[0] != state.length or state.length > self.QUICK_FINISH_BYTES or self.has(sha):
            return None
        part = self._partial(sha)
        if part is None:
            return None
        with open(part, "rb") as f:
            if not f.read(8).startswith((b"\xff\xd8\xff", b"\x89PNG\r\n\x1a\n")):
                return None
        lock = self.lock(sha)
        if not lock.acquire(blocking=False):
            return None
        try:
            return self._finish(sha, part)
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
        size = part.stat().st_size
        digest = self._digest(sha, part, size).hexdigest()
        if digest != sha:
            part.unlink()
            raise UploadMismatch(f"the bytes received hash to {digest}, not to photo {sha}; the upload "
                                 "was discarded: send the photo again from byte 0")
        try:
            check_image(part, name=f"photo {sha}")
        except PhotoError:
            part.unlink()
            raise
        final = self.path(sha)
        final.parent.mkdir(parents=True, exist_ok=True)
        # The bytes were flushed with the chunk; the folder is not flushed after the rename: a power cut that loses
        # the rename leaves the whole partial file, which /missing lists as begun at its full length, and the
        # tablet's next creation request for it finishes it (nothing sent twice, nothing half-kept shown).
        os.replace(part, final)
        size = final.stat().st_size
        return UploadState(size, size)

    # -- reading ---------------------------------------------------------------------------------------------
    def _thumb(self, sha: str, size: int = 320) -> Path:
        return self.root / "thumbs" / f"{sha}-{size}.png"

    def thumbnail(self, sha: str, *, size: int = 320) -> Path:
        """A PNG thumbnail, EXIF orientation applied (Pillow decodes the whole photo); made the first time it is
        asked for (a page, a return bundle), then kept. NotAnImage when the photo cannot be decoded after all."""
        out = self._thumb(sha, size)
        if not out.exists():
            make_thumbnail(self.path(sha), out, name=f"photo {sha}", size=size)
        return out


def _save_thumb(img: Any, out: Path, size: int) -> None:
    small = img.copy()
    small.thumbnail((size, size))
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{uuid.uuid4().hex}.tmp")
    small.save(tmp, format="PNG")
    os.replace(tmp, out)


def _leave_cache(fd: int) -> None:
    """Let the system drop a received file's bytes from its page cache once they are on the disk (Linux
    ``posix_fadvise(POSIX_FADV_DONTNEED)``; elsewhere nothing). A season's photos are written once and read
    rarely: kept in the cache they would push out what the camp server does read (its database), and each new
    photo would take fresh memory instead of the pages the last one left. Only the header and end are read again
    (the image check) before the file is renamed into place."""
    advise = getattr(os, "posix_fadvise", None)
    if advise is not None:
        advise(fd, 0, 0, os.POSIX_FADV_DONTNEED)


_FLUSHER = ThreadPoolExecutor(max_workers=4, thread_name_prefix="photo-flush")
"""Waits for a chunk's bytes to reach the disk while the receiving thread hashes them."""


def _hash_range(path: Path, start: int, length: int, digest: Any) -> None:
    """Feed ``length`` bytes of ``path`` from ``start`` to ``digest``: the bytes just written, read back from the
    page cache in pieces of 1 MiB (a photo is never held whole)."""
    with open(path, "rb") as f:
        f.seek(start)
        while length > 0:
            block = f.read(min(length, 1 << 20))
            if not block:
                raise OSError(f"{path.name} ends {length} bytes before the chunk written to it")
            digest.update(block)
            length -= len(block)


class Chunk:
    """The chunk being received: ``write`` refuses bytes past the declared length and writes each piece to the
    file as it comes (a request body arrives in pieces of up to some 256 KiB): no copy of the bytes. ``written``
    counts the bytes written; the upload's ``receiving`` flushes them after the last piece (also when the
    connection was cut) and hashes them meanwhile."""

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


def check_image(path: Path, *, name: str) -> tuple[int, int, str]:
    """Whether a complete file is a whole image within the bounds, without decoding its pixels: Pillow reads the
    header (format, width, height: more than ``MAX_PHOTO_PIXELS`` is refused), then the file must end as its
    format says an image ends (``_whole``); a format we cannot judge so is decoded whole. Width, height, format."""
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as img:
            width, height, fmt = img.width, img.height, img.format or "unknown"
            if width * height > MAX_PHOTO_PIXELS:
                raise ImageTooLarge(f"{name} is {width} x {height} pixels, more than "
                                    f"{MAX_PHOTO_PIXELS // 1_000_000} megapixels; it was not kept")
            whole = _whole(img.fp, fmt)
            if whole is None:
                img.draft("RGB", (320, 320))
                img.load()  # raises OSError when cut short
            elif not whole:
                raise OSError(f"the {fmt} data stops before the image's end marker")
            return width, height, fmt
    except Image.DecompressionBombError as exc:
        raise ImageTooLarge(f"{name} has more than {MAX_PHOTO_PIXELS // 1_000_000} megapixels ({exc}); it was not kept") from None
    except UnidentifiedImageError:
        raise NotAnImage(f"{name} is not an image Baulk can read (no picture format Pillow knows); it was not kept") from None
    except OSError as exc:
        raise NotAnImage(f"{name} is not a whole image ({exc}); it was not kept: send it again") from None


_PNG_END = b"\x00\x00\x00\x00IEND\xaeB`\x82"  # an empty IEND chunk and its CRC (PNG specification, 5.6 and 11.2.5)


def _whole(f: Any, fmt: str) -> bool | None:
    """Whether the image file ``f`` runs to its format's end marker (None: a format not judged here).

    JPEG (ITU-T T.81, annex B): after the SOI marker, segments with a two-byte length lead to the first SOS; in
    the entropy-coded data after it an 0xFF byte is always followed by 0x00 or a restart marker, so an EOI
    (0xFF 0xD9) after the first SOS can only be the image's end: a file cut before it has none. Data after the EOI
    (a camera's trailer) is allowed. PNG: the file ends with the IEND chunk."""
    if fmt == "PNG":
        f.seek(0, os.SEEK_END)
        if f.tell() < len(_PNG_END):
            return False
        f.seek(-len(_PNG_END), os.SEEK_END)
        return bool(f.read(len(_PNG_END)) == _PNG_END)
    if fmt != "JPEG":
        return None
    scan = _jpeg_scan_start(f)
    if scan is None:
        return False
    end = f.seek(0, os.SEEK_END)
    tail = max(scan, end - (1 << 16))  # the EOI is nearly always in the last bytes: look there first
    f.seek(tail)
    if b"\xff\xd9" in f.read():
        return True
    f.seek(scan)
    carry = b""
    for block in iter(lambda: f.read(1 << 20), b""):
        if b"\xff\xd9" in carry + block:
            return True
        carry = block[-1:]
    return False


def _jpeg_scan_start(f: Any) -> int | None:
    """The offset where the first scan's entropy-coded data begins (after the SOS header); None when the marker
    segments before it are broken or cut short."""
    f.seek(0)
    if f.read(2) != b"\xff\xd8":
        return None
    while True:
        head = f.read(2)
        if len(head) < 2 or head[0] != 0xFF:
            return None
        marker = head[1]
        while marker == 0xFF:  # fill bytes before a marker
            more = f.read(1)
            if not more:
                return None
            marker = more[0]
        if marker == 0x01 or 0xD0 <= marker <= 0xD7:  # TEM and RSTn stand alone
            continue
        if marker == 0xD9:
            return None  # an EOI before any scan
        size = f.read(2)
        if len(size) < 2 or int.from_bytes(size, "big") < 2:
            return None
        length = int.from_bytes(size, "big")
        if marker == 0xDA:
            return int(f.tell()) + length - 2
        f.seek(length - 2, os.SEEK_CUR)


def make_thumbnail(path: Path, out: Path, *, name: str, size: int = 320) -> None:
    """Decode the photo with Pillow (a JPEG scaled while decoded, libjpeg's DCT scaling, no smaller than ``size``)
    and keep a PNG of at most ``size`` pixels a side, EXIF orientation applied (temporary name, then renamed)."""
    from PIL import Image, ImageOps, UnidentifiedImageError

    try:
        with Image.open(path) as img:
            img.draft("RGB", (size, size))
            img.load()
            _save_thumb(ImageOps.exif_transpose(img), out, size)
    except (UnidentifiedImageError, OSError) as exc:
        raise NotAnImage(f"{name} cannot be decoded for its thumbnail ({exc})") from None


def photo_dir(database_url: str, given: Path | None = None) -> Path:
    """The camp's photo folder, the one place it is decided: ``given`` (a command's ``--photos-dir``), else the
    server setting ``photos_dir`` (``BAULK_SERVER_PHOTOS_DIR``), else beside the store (``default_photo_dir``)."""
    if given is not None:
        return Path(given)
    from .settings import ServerSettings

    return ServerSettings().photos_dir or default_photo_dir(database_url)


def vault_for(store: Any, given: Path | None = None) -> PhotoVault:
    """The photo folder of a store opened by a command (``photo_dir``)."""
    return PhotoVault(photo_dir(store.url, given))


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


def register_rows(conn: sa.Connection, *, subject_ids: Iterable[uuid.UUID] | None = None,
                  voided: bool = False) -> list[dict[str, Any]]:
    """The photo register (not voided; with ``voided`` the voided photos too), oldest first, with the taking
    device's label and whether it shows a find flagged as possible human remains; optionally for some subjects."""
    photo, device, find = metadata.tables["photo"], metadata.tables["device"], metadata.tables["find"]
    q = (sa.select(photo, device.c.label.label("device_label"),
                   sa.func.coalesce(find.c.human_remains, False).label("human_remains"))
         .select_from(photo.outerjoin(device, device.c.id == photo.c.device_id)
                      .outerjoin(find, (photo.c.subject == "find") & (find.c.id == photo.c.subject_id)))
         .order_by(photo.c.taken_at, photo.c.number))
    if not voided:
        q = q.where(photo.c.voided.is_(False))
    if subject_ids is not None:
        q = q.where(photo.c.subject_id.in_(list(subject_ids)))
    return [dict(r._mapping) for r in conn.execute(q)]
