"""A power-cut simulator for the tablet store's write path (a test harness, not shipped code).

How it works:

1. ``record_trace`` runs the real ``TabletStore`` (stdlib sqlite3 through SQLAlchemy) and records every SQL
   statement it sends, with its parameters, and every COMMIT/ROLLBACK, plus an ``ack`` marker each time
   ``save_find`` returns (the moment the recorder is told "saved").
2. ``run_trial`` replays that trace on a copy of the starting file through ``apsw`` with a VFS shim
   (``CutVFS``) that keeps, per file, the image as of its last ``xSync`` and the writes and truncations since.
   At a random file operation the power goes: that operation and every later one fail. The file as a disk
   could leave it is then built from the last synced image plus a random subset of the unsynced writes, kept
   sector by sector (512 bytes), with the in-flight write leaving one sector of garbage.
3. The crashed files are opened by a plain SQLite (the stdlib module), which runs WAL recovery, then checked:
   ``PRAGMA integrity_check`` must say ok, and every acknowledged find must be there with its field versions.

Photos (``mobile.photos.keep_file``): ``record_trace`` also records the photo file's disk steps in their place
among the SQL (written and flushed under a temporary name, renamed to its hash, the folder flushed), and an
``ack`` for each photo ``save_photo`` returns. The replay runs them through the same model, on the same count of
operations, so a cut can fall on any of them: a file's unflushed writes are kept sector by sector at random like
the database's, and a rename is durable only once its folder is flushed (before that, a cut keeps it or not at
random). ``check_photos`` then asks: does every photo record have its whole file (bytes hashing to its name)?

Assumptions, stated: a created or deleted file's directory entry is durable at once (SQLite syncs the directory
where it matters; a photo file is created under its temporary name); a rename is not durable until its folder is
flushed; the ``-shm`` index is not durable (SQLite rebuilds it from the WAL); sectors are 512 bytes.
The model of a disk that keeps some unsynced writes and tears sectors follows the SQLite documentation's
"Atomic Commit In SQLite" section 2 (hardware assumptions) - from memory of that page.
"""

from __future__ import annotations

import hashlib
import os
import random
import shutil
import sqlite3
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

import sqlalchemy as sa

SECTOR = 512


class PowerCut(Exception):
    """The machine lost power: no file operation succeeds any more."""


# -- recording the store's SQL ------------------------------------------------------------------------------
@dataclass
class Trace:
    steps: list[tuple[str, Any, Any]] = field(default_factory=list)  # (kind, sql or id, params)

    def acks(self) -> list[str]:
        """The finds the recorder was told were saved, in order."""
        return [s[1] for s in self.steps if s[0] == "ack"]

    def photo_acks(self) -> list[str]:
        """The photos the recorder was told were kept, in order."""
        return [s[1] for s in self.steps if s[0] == "ack_photo"]


FILE_KINDS = ("pwrite", "psync", "prename", "pdirsync")  # a photo file's disk steps, in a trace


def _record_file_steps(trace: Trace, root: Path) -> Callable[[], None]:
    """Record ``mobile.photos.keep_file``'s disk steps (paths relative to ``root``, the tablet file's folder) while
    they still run for real; returns the function that puts them back."""
    import mobile.photos as photos

    real = {name: getattr(photos, name) for name in photos.FILE_STEPS}

    def rel(path: Path) -> str:
        return Path(os.path.relpath(path, root)).as_posix()

    def write_synced(path: Path, data: bytes) -> None:
        real["_write_synced"](path, data)
        trace.steps.append(("pwrite", rel(path), bytes(data)))
        trace.steps.append(("psync", rel(path), None))

    def rename(source: Path, target: Path) -> None:
        real["_rename"](source, target)
        trace.steps.append(("prename", rel(source), rel(target)))

    def fsync_dir(path: Path) -> None:
        real["_fsync_dir"](path)
        trace.steps.append(("pdirsync", rel(path), None))

    for name, fn in (("_write_synced", write_synced), ("_rename", rename), ("_fsync_dir", fsync_dir)):
        setattr(photos, name, fn)

    def restore() -> None:
        for name, fn in real.items():
            setattr(photos, name, fn)

    return restore


def record_trace(work: Callable[..., None], *, root: Path | None = None) -> Trace:
    """Record every statement, commit and rollback any SQLAlchemy engine sends while ``work(ack)`` runs;
    ``work`` calls ``ack(find_id)`` after each save the recorder would be told about, and
    ``ack(photo_id, kind="photo")`` after each photo kept. With ``root`` (the tablet file's folder), the photo
    files' disk steps are recorded too, their paths relative to it."""
    trace = Trace()

    def on_execute(_conn: Any, _cursor: Any, statement: str, parameters: Any, _context: Any, executemany: bool) -> None:
        # SQLAlchemy's "insertmanyvalues" batches are flagged executemany but carry one flat parameter row
        many = executemany and bool(parameters) and isinstance(parameters[0], (list, tuple))
        trace.steps.append(("many" if many else "sql", statement, parameters))

    def on_commit(_conn: Any) -> None:
        trace.steps.append(("commit", None, None))

    def on_rollback(_conn: Any) -> None:
        trace.steps.append(("rollback", None, None))

    listeners = [("before_cursor_execute", on_execute), ("commit", on_commit), ("rollback", on_rollback)]
    for name, fn in listeners:
        sa.event.listen(sa.engine.Engine, name, fn)
    restore = _record_file_steps(trace, root) if root is not None else None
    try:
        work(lambda record_id, kind="find": trace.steps.append(
            ("ack" if kind == "find" else f"ack_{kind}", record_id.hex, None)))
    finally:
        for name, fn in listeners:
            sa.event.remove(sa.engine.Engine, name, fn)
        if restore is not None:
            restore()
    return trace


def record_before_file(trace: Trace) -> Trace:
    """A control: each photo's file steps moved after the next commit (the record's), as if the record were
    written first."""
    out: list[tuple[str, Any, Any]] = []
    held: list[tuple[str, Any, Any]] = []
    for step in trace.steps:
        if step[0] in FILE_KINDS:
            held.append(step)
            continue
        out.append(step)
        if step[0] == "commit" and held:
            out += held
            held = []
    return Trace(out + held)


def without_flushes(trace: Trace) -> Trace:
    """A control: the photo file written and renamed but never flushed (no fsync of the file or its folder)."""
    return Trace([s for s in trace.steps if s[0] not in ("psync", "pdirsync")])


# -- the VFS shim -----------------------------------------------------------------------------------------------
@dataclass
class FileModel:
    durable: bytearray
    pending: list[tuple[str, int, bytes]] = field(default_factory=list)  # ("w", offset, data) | ("t", size, b"")
    in_flight: tuple[int, int] | None = None  # (offset, length) of the write the power cut interrupted


def _apply(image: bytearray, op: tuple[str, int, bytes], keep: Callable[[], bool] | None = None) -> None:
    kind, at, data = op
    if kind == "t":
        del image[at:]
        return
    if len(image) < at + len(data):
        image.extend(b"\0" * (at + len(data) - len(image)))
    for s in range(0, len(data), SECTOR):
        if keep is None or keep():
            image[at + s:at + s + SECTOR] = data[s:s + SECTOR]


def _make_vfs_classes() -> tuple[type, type]:
    import apsw

    class CutFile(apsw.VFSFile):  # type: ignore[misc]
        def __init__(self, vfs: "CutVFS", name: Any, flags: Any) -> None:
            super().__init__("", name, flags)
            self.vfs = vfs
            self.key = Path(name.filename() if hasattr(name, "filename") else str(name)).name if name else None
            if self.key is not None and self.key not in vfs.files:
                try:
                    start = bytearray(Path(vfs.folder, self.key).read_bytes())
                except FileNotFoundError:
                    start = bytearray()
                vfs.files[self.key] = FileModel(start)

        def _model(self) -> FileModel | None:
            return self.vfs.files.get(self.key) if self.key and not self.key.endswith("-shm") else None

        def xWrite(self, data: bytes, offset: int) -> None:
            m = self._model()
            if m is not None:
                self.vfs.tick(m, offset, len(data))
                m.pending.append(("w", offset, bytes(data)))
            super().xWrite(data, offset)

        def xTruncate(self, size: int) -> None:
            m = self._model()
            if m is not None:
                self.vfs.tick(m, None, 0)
                m.pending.append(("t", size, b""))
            super().xTruncate(size)

        def xSync(self, flags: int) -> None:
            m = self._model()
            if m is not None:
                self.vfs.tick(m, None, 0)
                for op in m.pending:
                    _apply(m.durable, op)
                m.pending.clear()
            # no real fsync: the model is the disk, and trials run faster without it

    class CutVFS(apsw.VFS):  # type: ignore[misc]
        def __init__(self, name: str, folder: Path, cut_at: int | None) -> None:
            super().__init__(name, "")
            self.folder, self.cut_at = folder, cut_at
            self.ops = 0
            self.dead = False
            self.files: dict[str, FileModel] = {}
            # plain files (photos), outside SQLite: contents per file, and the names as the program and the disk see them
            self.plain: list[FileModel] = []
            self.names: dict[str, int] = {}  # path -> file, as the running program sees it
            self.durable_names: dict[str, int] = {}  # path -> file, as the disk keeps it
            self.pending_renames: list[tuple[str, str]] = []  # renames whose folder is not flushed yet
            self.file_ops: list[int] = []  # the operation numbers of the photo file steps (the cut points they give)

        def tick(self, model: FileModel | None, offset: int | None, length: int) -> None:
            if self.dead:
                raise PowerCut("no power")
            self.ops += 1
            if self.cut_at is not None and self.ops >= self.cut_at:
                self.dead = True
                if offset is not None and model is not None:
                    model.in_flight = (offset, length)
                raise PowerCut("power cut")

        # -- a photo file's steps (mobile.photos.keep_file), replayed on the model --
        def plain_step(self, kind: str, path: str, other: Any) -> None:
            self.file_ops.append(self.ops + 1)
            if kind == "pwrite":  # created (its name durable at once) and written
                model = FileModel(bytearray())
                self.plain.append(model)
                self.names[path] = self.durable_names[path] = len(self.plain) - 1
                self.tick(model, 0, len(other))
                model.pending.append(("w", 0, bytes(other)))
            elif kind == "psync":
                model = self.plain[self.names[path]]
                self.tick(model, None, 0)
                for op in model.pending:
                    _apply(model.durable, op)
                model.pending.clear()
            elif kind == "prename":
                self.tick(None, None, 0)
                self.names[other] = self.names.pop(path)
                self.pending_renames.append((path, other))
            elif kind == "pdirsync":
                self.tick(None, None, 0)
                for source, target in [r for r in self.pending_renames if str(Path(r[1]).parent) == path]:
                    self.durable_names[target] = self.durable_names.pop(source)
                    self.pending_renames.remove((source, target))
            else:
                raise ValueError(f"not a file step: {kind}")

        def xOpen(self, name: Any, flags: Any) -> CutFile:
            if self.dead:
                raise PowerCut("no power")
            return CutFile(self, name, flags)

        def xDelete(self, filename: str, syncdir: bool) -> None:
            if self.dead:
                raise PowerCut("no power")
            self.files.pop(Path(filename).name, None)
            super().xDelete(filename, syncdir)

    return CutFile, CutVFS


# -- one trial --------------------------------------------------------------------------------------------------
@dataclass
class Outcome:
    cut_at: int | None
    ops: int
    acked: list[str]
    integrity: str
    lost: list[str]
    photos_acked: list[str] = field(default_factory=list)
    broken_photos: list[str] = field(default_factory=list)  # photo records whose file is missing or not whole
    orphan_files: int = 0  # whole photo files no record names (harmless: mobile.photos.orphans lists them)
    file_ops: list[int] = field(default_factory=list)

    @property
    def corrupt(self) -> bool:
        return self.integrity != "ok"


def _replay(conn: Any, trace: Trace, pragmas: list[tuple[str, str]], acked: list[str], vfs: Any = None,
            photos_acked: list[str] | None = None) -> None:
    for name, value in pragmas:
        conn.execute(f"PRAGMA {name}={value}").fetchall()
    for kind, sql, params in trace.steps:
        if kind == "ack":
            acked.append(sql)
        elif kind == "ack_photo":
            if photos_acked is not None:
                photos_acked.append(sql)
        elif kind in FILE_KINDS:
            vfs.plain_step(kind, sql, params)
        elif kind == "commit":
            conn.execute("COMMIT")
        elif kind == "rollback":
            conn.execute("ROLLBACK")
        elif kind == "many":
            conn.executemany(sql, params)
        else:
            conn.execute(sql, params).fetchall()


def crash_image(vfs: Any, out: Path, rng: random.Random) -> None:
    """The files as the disk keeps them after the cut."""
    out.mkdir(parents=True, exist_ok=True)
    for key, m in vfs.files.items():
        if key.endswith("-shm"):
            continue
        image = bytearray(m.durable)
        for op in m.pending:
            if op[0] == "t":
                if rng.random() < 0.5:
                    _apply(image, op)
                continue
            _apply(image, op, keep=lambda: rng.random() < 0.5)
        if m.in_flight is not None:  # the interrupted write: one sector of garbage somewhere in its range
            at, length = m.in_flight
            s = at + SECTOR * rng.randrange(max(1, length // SECTOR))
            end = min(s + SECTOR, at + length)  # within the write's own range (powersafe overwrite)
            if len(image) < end:
                image.extend(b"\0" * (end - len(image)))
            image[s:end] = rng.randbytes(end - s)
        (out / key).write_bytes(bytes(image))
    names = dict(vfs.durable_names)
    for source, target in vfs.pending_renames:  # a rename whose folder was not flushed: kept or not
        if source in names and rng.random() < 0.5:
            names[target] = names.pop(source)
    for path, index in names.items():
        (out / path).parent.mkdir(parents=True, exist_ok=True)
        (out / path).write_bytes(_disk_image(vfs.plain[index], rng))


def _disk_image(m: FileModel, rng: random.Random) -> bytes:
    """A plain file as the disk keeps it: flushed bytes, a random part of the rest, garbage where the cut fell."""
    image = bytearray(m.durable)
    for op in m.pending:
        _apply(image, op, keep=lambda: rng.random() < 0.5)
    if m.in_flight is not None:
        at, length = m.in_flight
        s = at + SECTOR * rng.randrange(max(1, length // SECTOR))
        end = min(s + SECTOR, at + length)
        if len(image) < end:
            image.extend(b"\0" * (end - len(image)))
        image[s:end] = rng.randbytes(end - s)
    return bytes(image)


def check_photos(db: Path, photos_acked: list[str]) -> tuple[list[str], list[str], int]:
    """After a restart: the photo records whose file is missing or not whole (its bytes do not hash to its name)
    or whose find does not list its hash in ``photo_hashes``, the acknowledged photos with no record, and how many
    whole files no record names."""
    import json

    folder = db.with_name(db.stem + "-photos")
    try:
        with sqlite3.connect(db) as raw:
            rows = raw.execute("SELECT id, sha256 FROM photo").fetchall()
            of_finds = raw.execute("SELECT photo.id, photo.sha256, find.photo_hashes FROM photo JOIN find "
                                   "ON find.id = photo.subject_id WHERE photo.subject = 'find'").fetchall()
    except sqlite3.DatabaseError:
        return [], list(photos_acked), 0
    unlinked = [f"{rid} ({sha[:12]}) not in its find's photo_hashes" for rid, sha, hashes in of_finds
                if sha not in json.loads(hashes)]

    def whole(sha: str) -> bool:
        path = folder / sha[:2] / sha
        return path.is_file() and hashlib.sha256(path.read_bytes()).hexdigest() == sha

    broken = [f"{rid} ({sha[:12]}) without its whole file" for rid, sha in rows if not whole(sha)] + unlinked
    have = {rid for rid, _sha in rows}
    named = {sha for _rid, sha in rows}
    orphans = sum(1 for p in folder.glob("??/*") if not p.name.startswith(".") and p.name not in named)
    return broken, [a for a in photos_acked if a not in have], orphans


def check_image(db: Path, acked: list[str]) -> tuple[str, list[str]]:
    """Integrity check by a plain SQLite, and the acknowledged finds that are not there whole."""
    try:
        with sqlite3.connect(db) as raw:
            rows = raw.execute("PRAGMA integrity_check").fetchall()
            integrity = "ok" if rows == [("ok",)] else "; ".join(r[0] for r in rows[:3])
            if not acked:
                return integrity, []
            have = {r[0] for r in raw.execute("SELECT id FROM find")}
            versioned = {r[0] for r in raw.execute("SELECT DISTINCT record_id FROM field_version WHERE record = 'find'")}
    except sqlite3.DatabaseError as exc:
        return f"unreadable: {exc}", list(acked)
    return integrity, [a for a in acked if a not in have or a not in versioned]


def run_trial(base: Path, trace: Trace, work: Path, *, seed: int, cut_range: tuple[int, int] | None,
              pragmas: list[tuple[str, str]]) -> Outcome:
    """Replay ``trace`` on a copy of the store file ``base``, cutting the power at a random operation in
    ``cut_range`` (None: no cut, to count operations); check what a restart would find."""
    import apsw

    _CutFile, CutVFS = _make_vfs_classes()
    rng = random.Random(seed)
    live, after = work / "live", work / "after"
    for d in (live, after):
        shutil.rmtree(d, ignore_errors=True)
    live.mkdir(parents=True)
    shutil.copy(base, live / base.name)
    cut_at = rng.randint(*cut_range) if cut_range else None
    name = f"cut{seed}-{uuid.uuid4().hex[:6]}"
    vfs = CutVFS(name, live, cut_at)
    acked: list[str] = []
    photos_acked: list[str] = []
    conn = apsw.Connection(str(live / base.name), vfs=name)
    try:
        _replay(conn, trace, pragmas, acked, vfs, photos_acked)
    except Exception as exc:  # noqa: BLE001 - the cut surfaces as whatever error SQLite maps it to
        if not vfs.dead:
            raise
        del exc
    finally:
        try:
            conn.close(True)
        except Exception:  # noqa: BLE001 - closing a dead machine's files fails; the image is already taken
            pass
    crash_image(vfs, after, rng)
    ops = vfs.ops
    vfs.unregister()
    integrity, lost = check_image(after / base.name, acked)
    outcome = Outcome(cut_at, ops, acked, integrity, lost, photos_acked, file_ops=list(vfs.file_ops))
    if any(step[0] in FILE_KINDS for step in trace.steps):
        broken, lost_photos, outcome.orphan_files = check_photos(after / base.name, photos_acked)
        outcome.broken_photos = broken
        outcome.lost += lost_photos
    return outcome


def trials(base: Path, trace: Trace, work: Path, *, n: int, pragmas: list[tuple[str, str]],
           first_op: int = 1) -> Iterator[Outcome]:
    """``n`` trials with cuts spread over the operations of the trace (after ``first_op``)."""
    dry = run_trial(base, trace, work, seed=0, cut_range=None, pragmas=pragmas)
    for seed in range(1, n + 1):
        yield run_trial(base, trace, work, seed=seed, cut_range=(first_op, dry.ops), pragmas=pragmas)
