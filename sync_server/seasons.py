"""Season archives: carrying one server store's work into another (last season's laptop into this season's).

An archive is a zip holding ``manifest.json`` and ``versions.jsonl`` (every field version the source store
holds, in change-log order, one JSON object a line). The manifest names the format and its version, the source
store's identity, the highest find number ever issued or used there, the count of versions and the SHA-256 of
``versions.jsonl``. The archive is checked whole (zip checksums, format, hash, every version's shape) before
anything is applied; a bad archive changes nothing. It carries no seal: it moves between two stores the same
data manager runs, on the server machine's own command line, not over the network.

Importing applies the versions through the shared merge (``insert_versions`` + ``materialize``), in one
transaction: records both stores hold merge by their versions (edits made in both become conflicts), finds
sharing a number become ``duplicate_number`` conflicts, units and horizons carry over, and new number blocks
start above every number the archive knew (``number_floor``: a whole number up to 2^53 - 1; one more than ten
blocks above the highest number issued or used here is imported only when the manager confirms it). The version
log is read line by line within caps (``schema.sync.bundle``), so a crafted archive cannot fill the memory.
Importing the same archive again applies nothing.
Device rows and number blocks stay behind (server-owned: tablets are enrolled afresh each season).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import zipfile
from pathlib import Path
from typing import Any, Callable

import sqlalchemy as sa
from pydantic import ValidationError

from schema.errors import BundleInvalid, NumberTooFar
from schema.fields import MAX_JSON_INT
from schema.sync import SERVER_OWNED, Version
from schema.sync.bundle import ARCHIVE_LOG_CAP, MANIFEST_CAP, open_checked_zip
from schema.sync.replica import insert_versions, load_identity, materialize, retry_pending, row_to_version, state_get, state_set
from schema.sync.tables import field_version, pending_row

from .store import ServerStore, far_number, number_floor
from .sync import count_conflicts

__all__ = ["ARCHIVE_FORMAT", "ARCHIVE_VERSION", "import_archive", "number_floor", "read_archive", "write_archive"]

ARCHIVE_FORMAT = "baulk-season-archive"
ARCHIVE_VERSION = 1
_PAGE = 5000


def write_archive(store: ServerStore, path: Path, *, progress: Callable[[int, int], None] | None = None) -> dict[str, Any]:
    """Write the store's whole version log as an archive (atomically: a temporary file renamed into place)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    h = hashlib.sha256()
    count = 0
    with store.read() as conn:
        total = int(conn.execute(sa.select(sa.func.count()).select_from(field_version)
                                 .where(field_version.c.record.notin_(SERVER_OWNED))).scalar_one())
        floor = number_floor(conn)
        source = str(load_identity(conn).device) if state_get(conn, "device") else None
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as z:
            with z.open("versions.jsonl", "w") as out:
                after = -1
                while True:
                    rows = conn.execute(sa.select(field_version).where(
                        field_version.c.log_seq > after, field_version.c.record.notin_(SERVER_OWNED))
                        .order_by(field_version.c.log_seq).limit(_PAGE)).all()
                    if not rows:
                        break
                    for r in rows:
                        line = (row_to_version(r).canonical() + "\n").encode()
                        h.update(line)
                        out.write(line)
                    count += len(rows)
                    after = rows[-1].log_seq
                    if progress:
                        progress(count, total)
            manifest = {
                "format": ARCHIVE_FORMAT, "format_version": ARCHIVE_VERSION, "source": source,
                "created_at": dt.datetime.now(dt.timezone.utc).isoformat(), "versions": count,
                "versions_sha256": h.hexdigest(), "number_floor": floor,
            }
            z.writestr("manifest.json", json.dumps(manifest, indent=2))
    with open(tmp, "rb") as fh:
        os.fsync(fh.fileno())
    tmp.replace(path)
    return {**manifest, "path": str(path)}


def read_archive(path: Path) -> tuple[dict[str, Any], list[Version]]:
    """Check the whole archive; ``BundleInvalid`` names what is wrong. The version log is read line by line
    within its caps (``schema.sync.bundle.ARCHIVE_LOG_CAP``, ``LINE_CAP``), hashed as it streams."""
    path = Path(path)
    z, manifest = open_checked_zip(path, what="season archive", again="write it again from the old store",
                                   total_cap=ARCHIVE_LOG_CAP + MANIFEST_CAP)
    with z:
        if manifest.get("format") != ARCHIVE_FORMAT:
            raise BundleInvalid(f"{path.name} is not a season archive (format {manifest.get('format')!r})")
        if manifest.get("format_version") != ARCHIVE_VERSION:
            raise BundleInvalid(f"{path.name} has archive format {manifest.get('format_version')}; this server reads "
                                f"format {ARCHIVE_VERSION}: update Baulk on the server")
        floor = manifest.get("number_floor")
        if not isinstance(floor, int) or isinstance(floor, bool) or not 0 <= floor <= MAX_JSON_INT:
            shown = json.dumps(floor)
            raise BundleInvalid(f"{path.name}: the manifest's number_floor {shown[:60]} is not a whole number from 0 "
                                f"to {MAX_JSON_INT}; write the archive again from the old store (nothing was imported)")
        h = hashlib.sha256()
        versions = []
        try:
            for n, line in enumerate(z.lines("versions.jsonl", ARCHIVE_LOG_CAP), start=1):
                h.update(line + b"\n")
                try:
                    versions.append(Version.model_validate_json(line))
                except ValidationError as exc:
                    where = ".".join(str(p) for p in exc.errors()[0]["loc"])
                    raise BundleInvalid(f"{path.name}: line {n} of the version log is not a version ({where}); "
                                        "nothing was imported") from None
        except KeyError:
            raise BundleInvalid(f"{path.name} has no version log; it is not a season archive or it was cut short") from None
    if h.hexdigest() != manifest.get("versions_sha256"):
        raise BundleInvalid(f"{path.name}: the version log does not match its hash; nothing was imported")
    if len(versions) != manifest.get("versions"):
        raise BundleInvalid(f"{path.name}: {len(versions)} versions where the manifest says {manifest.get('versions')}")
    return manifest, versions


def import_archive(store: ServerStore, path: Path, *, confirm_far: bool = False) -> dict[str, Any]:
    """Check, then apply an archive in one transaction; returns what happened.

    The archive's ``number_floor`` (new blocks start above it) more than ten blocks above the highest number
    issued or used here, once its finds are in, is refused (``NumberTooFar``, nothing applied) unless
    ``confirm_far``: every block issued after it would start there."""
    manifest, versions = read_archive(path)
    accepted = [v for v in versions if v.record not in SERVER_OWNED]
    with store.atomic() as conn:
        store._serialize(conn, "changelog")  # noqa: SLF001
        store._serialize(conn, "number_block")  # noqa: SLF001
        top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0
        new = insert_versions(conn, accepted, next_log_seq=top + 1)
        stats = materialize(conn, {(v.record, v.record_id) for v in new}, known=new)
        retry_pending(conn)
        if new:
            store.mark_changed()  # the checks run again once this commits
        imported = int(manifest["number_floor"])
        block_size = store.block_size()
        highest = None if confirm_far else far_number(conn, imported, block_size=block_size)
        if highest is not None:
            raise NumberTooFar(f"{Path(path).name} sets the number floor to {imported}", imported, highest, block_size,
                               "Write the archive again from the old store if that floor is wrong")
        floor = max(number_floor(conn), imported)
        state_set(conn, "number_floor", floor)
        conflicts = count_conflicts(conn)
        pending = int(conn.execute(sa.select(sa.func.count()).select_from(pending_row)).scalar_one())
    return {"versions": len(versions), "applied": len(new), "already_held": len(accepted) - len(new),
            "rows_written": stats["written"], "pending_rows": pending, "conflicts_open": conflicts,
            "number_clashes": stats.get("number_clashes", 0), "number_floor": floor}
