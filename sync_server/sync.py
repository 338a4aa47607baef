"""Push and pull on the camp server: each (device, batch) applied once, in one transaction; the change log
paged by position. The merge itself is the shared version layer (``schema.sync``).

On PostgreSQL, writers of the change log take a transaction-scoped advisory lock, so positions are assigned
and committed in order and a pulling tablet never skips a version committed late (no cursor gaps).
"""

from __future__ import annotations

import datetime as dt
import json
import time
from typing import Any

import sqlalchemy as sa

from schema.errors import BatchClash, FieldProblem, NumberTooFar, RecordInvalid, RecordNotFound, WrongDevice
from schema.fields import MAX_JSON_INT
from schema.records import Device, NumberBlock
from schema.sync import SERVER_OWNED, Version, VersionSet, batch_hash, edit_parents, resolution_parents, version_id
from schema.sync.versions import check_version_ids, needs_manager
from schema.sync.replica import (
    insert_versions, load_identity, materialize, record_versions, retry_pending, row_to_version, save_identity,
)
from schema.sync.tables import field_version, open_conflict, pending_row
from schema.tables import metadata

from .store import ServerStore
from .tables import push_batch

__all__ = ["apply_push", "batch_hash", "count_conflicts", "list_conflicts", "list_pending", "number_refusal",
           "pull_page", "refusal", "replay_answer", "resolve_conflict"]

MAX_BATCH = 5000
MAX_PAGE = 2000
MAX_SCAN = 10 * MAX_PAGE  # change-log positions one pull page reads at most (the caller's own left out)


def _now_ms() -> int:
    return time.time_ns() // 1_000_000


def apply_push(store: ServerStore, *, device: Device, batch: int, content_hash: str, versions: list[Version],
               now: dt.datetime | None = None) -> dict[str, Any]:
    """Apply one push batch exactly once; the same batch again returns the stored acknowledgement.

    A batch already applied is answered from its stored acknowledgement when the hash it names is the one
    applied (nothing is applied either way, so its versions need not be hashed again); a new batch must match
    its hash before anything is written.

    The acknowledgement counts what became of every version sent: ``applied`` (new here), ``duplicates`` (held
    already), ``ignored`` (server-owned records, never taken from a device) and ``refused``: set-up records and
    fields a device other than a manager may not write (``schema.sync.versions.MANAGER_OWNED`` and
    ``MANAGER_FIELDS``) and find numbers past 2^53 - 1, each listed with its reason. Refused versions are
    acknowledged with their batch (the device does not send them again) and never stored.

    A batch holding a version whose id is not ``<its device>:<its sequence>`` is refused whole
    (``VersionIdMismatch``): nothing of it is applied or acknowledged."""
    foreign = sorted({str(v.device) for v in versions if v.device != device.id})
    if foreign:
        raise WrongDevice(f"batch {batch} carries versions of device {foreign[0]}, not of {device.label}; "
                          "a tablet pushes only its own edits")
    check_version_ids(versions, where=f"batch {batch} of {device.label}", fix=(
        "A tablet names each version by its own device and sequence, so this batch was altered after the tablet "
        "wrote it; ask the data manager to check that tablet and re-enrol it as a new device."))
    with store.atomic() as conn:
        store._serialize(conn, "changelog")  # noqa: SLF001
        done = conn.execute(sa.select(push_batch).where(push_batch.c.device == device.id, push_batch.c.batch == batch)).first()
        if done is not None:
            if done.content_hash != content_hash:
                raise BatchClash(
                    f"batch {batch} of {device.label} was already applied with different content: this tablet was "
                    "probably restored from an old copy. The data manager must re-enrol it as a new device"
                )
            return replay_answer(done.ack, received=len(versions))
        if batch_hash(versions) != content_hash:
            raise BatchClash(f"batch {batch} does not match its own hash; it was damaged in transfer, send it again")
        taken = [v for v in versions if v.record not in SERVER_OWNED]  # server-owned: never taken from tablets
        refused: list[tuple[Version, str]] = []
        accepted: list[Version] = []
        far = _FarNumbers(store, conn)
        for v in taken:
            why = _refusal(v, device) or far.refusal(v, device)
            if why is None:
                accepted.append(v)
            else:
                refused.append((v, why))
        top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0
        new = insert_versions(conn, accepted, next_log_seq=top + 1, batch=batch)
        stats = materialize(conn, {(v.record, v.record_id) for v in new}, known=new)
        retry_pending(conn)
        if new:
            store.mark_changed()  # the checks run again once this commits (sync_server.validation)
        blocks = _top_up(store, conn, device, now)
        ack = {
            "batch": batch, "received": len(versions), "applied": len(new),
            "duplicates": len(accepted) - len(new), "ignored": len(versions) - len(taken),
            "refused": [{"version": v.id, "record": v.record, "field": v.field, "reason": why} for v, why in refused],
            "rows_written": stats["written"],
            "pending_rows": int(conn.execute(sa.select(sa.func.count()).select_from(pending_row)).scalar_one()),
            "conflicts_open": count_conflicts(conn),
            "number_blocks": [{"first": b.first, "last": b.last} for b in blocks], "replayed": False,
        }
        conn.execute(push_batch.insert().values(device=device.id, batch=batch, content_hash=content_hash, ack=ack,
                                                received_at=now or dt.datetime.now(dt.timezone.utc)))
    return {**ack, "server_time_ms": _now_ms()}


def replay_answer(first: dict[str, Any], *, received: int) -> dict[str, Any]:
    """The answer to a batch applied before: this request applied nothing (every version in it is held), and
    ``original`` is the first answer. The refusals and number blocks of the first answer are given again (a
    tablet sends a batch again when that answer never reached it)."""
    first = {"refused": [], **first}  # older acknowledgements: none refused
    taken = received - first.get("ignored", 0) - len(first["refused"])
    return {**first, "received": received, "applied": 0, "duplicates": max(0, taken), "rows_written": 0,
            "replayed": True, "original": {k: first[k] for k in ("applied", "duplicates", "ignored", "rows_written")
                                           if k in first}, "server_time_ms": _now_ms()}


def _refusal(version: Version, device: Device) -> str | None:
    """Why this version is not taken from this device (None: it is taken)."""
    if device.role != "manager" and needs_manager(version.record, version.field):
        return refusal(version, device)
    if (version.record, version.field) == ("find", "number") and _past_bound(version.value):
        return number_refusal(version, device)
    return None


def _past_bound(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and value > MAX_JSON_INT


def _whole(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


class _FarNumbers:
    """Find numbers far above every number issued or used here (``store.far_number``): taken from no device, or
    every block issued after one would start above it (and one at 2^53 - 1 would leave no number to issue).
    Tablets number finds from their own blocks, so only a damaged or hostile device sends one; a data manager
    who means a far number sets it at camp, confirmed (``resolve_conflict``'s ``confirm_far``)."""

    def __init__(self, store: ServerStore, conn: sa.Connection) -> None:
        self.store, self.conn = store, conn
        self._limit: int | None = None

    def refusal(self, version: Version, device: Device) -> str | None:
        from .store import FAR_BLOCKS, far_number, number_floor

        if (version.record, version.field) != ("find", "number") or not _whole(version.value):
            return None
        if self._limit is None:
            self.block_size = self.store.block_size()
            self._limit = number_floor(self.conn) + FAR_BLOCKS * self.block_size
        if version.value <= self._limit:
            return None
        highest = far_number(self.conn, version.value, block_size=self.block_size)
        return (f"{device.label} sent find number {version.value} for find {version.record_id}, more than "
                f"{FAR_BLOCKS} blocks of {self.block_size} numbers above {highest}, so this value was not applied "
                "(every block issued after it would start above it); give the find a number from the tablet's own "
                "number block and sync again.")


def number_refusal(version: Version, device: Device) -> str:
    """Why a find number past 2^53 - 1 is not taken: every block issued after it would start above it."""
    return (f"{device.label} sent find number {version.value} for find {version.record_id}, past the largest find "
            f"number Baulk keeps ({MAX_JSON_INT}, the largest whole number JSON carries exactly), so this value was "
            "not applied; give the find a number from the tablet's own number block and sync again.")


def refusal(version: Version, device: Device) -> str:
    """Why a device that is not a manager may not write this set-up record or field, and what to do instead."""
    value = json.dumps(version.value, ensure_ascii=False)
    value = value if len(value) <= 60 else value[:57] + "..."
    what = ("A unit's horizon is assigned" if (version.record, version.field) == ("unit", "horizon_id")
            else f"{_SETUP_NAMES.get(version.record, version.record).capitalize()} records are set up")
    article = "an" if device.role[:1] in "aeiou" else "a"
    return (f"{device.label} is {article} {device.role} device and may not set {version.record}.{version.field} of "
            f"{version.record} {version.record_id} to {value}. {what} only by a manager device or the camp server, "
            "so this value was not applied; ask the data manager to make the change.")


_SETUP_NAMES = {"control_point": "control point", "horizon_assignment": "horizon assignment",
                "age_determination": "age determination"}


def _top_up(store: ServerStore, conn: sa.Connection, device: Device, now: dt.datetime | None) -> list[NumberBlock]:
    """Issue a new block when the device has used half of its newest one (never reissuing numbers)."""
    if device.role != "recorder":
        return []
    blocks = sorted(store.blocks_for(device.id), key=lambda b: b.first)
    if not blocks:
        return [store.issue_number_block(device_id=device.id, now=now)]
    newest = blocks[-1]
    t = metadata.tables["find"]
    used = conn.execute(sa.select(sa.func.max(t.c.number)).where(t.c.device_id == device.id)).scalar() or 0
    if used >= newest.first + newest.size // 2:
        return [store.issue_number_block(device_id=device.id, now=now)]  # the site's block size
    return []


def pull_page(store: ServerStore, *, after: int, limit: int = 500, device: Device | None = None) -> dict[str, Any]:
    """Versions after the cursor, in change-log order, with the next cursor. The caller's own versions are left
    out (the device holds them: it made them), number blocks travel only to the device they were issued to, and
    what places possible human remains travels only to the roles that see it (``schema.withholding``); the cursor
    still moves past everything left out, which ``own_left_out`` counts for the caller's own versions.

    A page holds up to ``limit`` versions: when the log after the cursor starts with the caller's own (a tablet
    pulling just after its push), the page reads on past them, up to ``MAX_SCAN`` positions, so the sync after a
    push of thousands of finds is not thousands of empty pages."""
    from .withholding import withheld_for

    limit = max(1, min(limit, MAX_PAGE))
    blocks = metadata.tables["number_block"]
    me = device.id if device else None
    kept: list[Any] = []
    cursor, more, scanned, own = after, False, 0, 0
    with store.read() as conn:
        mine = set(conn.execute(sa.select(blocks.c.id).where(blocks.c.device_id == me)).scalars())
        hidden = None
        while not more:
            rows = conn.execute(sa.select(field_version).where(field_version.c.log_seq > cursor)
                                .order_by(field_version.c.log_seq).limit(limit + 1)).all()
            if rows and hidden is None:
                hidden = withheld_for(conn, device.role if device else "")
            for r in rows:
                if len(kept) == limit or scanned == MAX_SCAN:
                    more = True  # r is left for the next page
                    break
                cursor, scanned = r.log_seq, scanned + 1
                if me is not None and r.device == me:
                    own += 1
                elif (r.record != "number_block" or r.record_id in mine) and not (
                        hidden and hidden.field(r.record, r.record_id, r.field)):
                    kept.append(r)
            else:
                if len(rows) <= limit:
                    break  # the log ends here
    return {"versions": [row_to_version(r) for r in kept], "next": cursor, "more": more, "own_left_out": own,
            "server_time_ms": _now_ms()}


def _one_per_clash(rows: list[Any]) -> list[Any]:
    """Open-conflict rows with a number clash once: it is kept on each find sharing the number (so each shows
    it), every row naming the same competing versions; the first row of each stands for the clash."""
    seen: set[tuple[str, ...]] = set()
    out = []
    for r in rows:
        if r.kind == "duplicate_number":
            key = tuple(sorted(r.leaves))
            if key in seen:
                continue
            seen.add(key)
        out.append(r)
    return out


def count_conflicts(conn: sa.Connection) -> int:
    """Open conflicts, a number clash counted once however many finds share the number."""
    others = conn.execute(sa.select(sa.func.count()).select_from(open_conflict)
                          .where(open_conflict.c.kind != "duplicate_number")).scalar_one()
    clashes = {tuple(sorted(leaves)) for leaves in conn.execute(
        sa.select(open_conflict.c.leaves).where(open_conflict.c.kind == "duplicate_number")).scalars()}
    return int(others) + len(clashes)


def list_conflicts(store: ServerStore) -> list[dict[str, Any]]:
    """Open conflicts with every competing value, who made it and when; a number clash is listed once, under
    the first of its finds, with each find's number among its values."""
    with store.read() as conn:
        rows = _one_per_clash(conn.execute(sa.select(open_conflict).order_by(
            open_conflict.c.record, open_conflict.c.record_id, open_conflict.c.field)).all())
        ids = [vid for r in rows for vid in r.leaves]
        found = {r.id: r for r in conn.execute(sa.select(field_version).where(field_version.c.id.in_(ids)))} if ids else {}
        devices = {d.id: d.label for d in store.list(Device)}
    out = []
    for r in rows:
        out.append({
            "record": r.record, "record_id": str(r.record_id), "field": r.field, "kind": r.kind,
            "values": [{"version": vid, "record_id": str(found[vid].record_id), "field": found[vid].field,
                        "value": found[vid].value, "device": devices.get(found[vid].device, str(found[vid].device)),
                        "at": dt.datetime.fromtimestamp(found[vid].wall_ms / 1000, dt.timezone.utc).isoformat()}
                       for vid in r.leaves if vid in found],
        })
    return out


def resolve_conflict(store: ServerStore, *, record: str, record_id: Any, field: str, value: Any,
                     confirm_far: bool = False) -> dict[str, Any]:
    """A manager's resolution: a new version of the field naming every competing version as a parent.

    - concurrent values of one field: ``value`` is the chosen (or edited) value;
    - a void against edits it did not see (field ``voided``): ``True`` keeps the void, ``False`` restores the find;
    - finds sharing a number (field ``number``): ``value`` is the new number for this find (the others keep theirs).

    A find number must be a whole number from 1 to 2^53 - 1 (``RecordInvalid``); one more than ten blocks above
    the highest number issued is refused (``NumberTooFar``) unless ``confirm_far``: every later block would start
    above it.
    """
    with store.atomic() as conn:
        store._serialize(conn, "changelog")  # noqa: SLF001
        state = VersionSet.of(record_versions(conn, [record_id]))
        key = (record, record_id, field)
        listed = conn.execute(sa.select(open_conflict.c.kind).where(
            open_conflict.c.record == record, open_conflict.c.record_id == record_id, open_conflict.c.field == field)).scalar()
        if listed is None:
            raise RecordNotFound(f"{record} {record_id} has no open conflict on {field}; list them first")
        if (record, field) == ("find", "number"):
            _check_renumbering(store, conn, record_id, value, confirm_far=confirm_far)
        if listed == "duplicate_number":
            parents = edit_parents(state, key)
        else:
            parents = resolution_parents(state, key)
        ident = load_identity(conn)
        seq, stamp = ident.next()
        v = Version(id=version_id(ident.device, seq), record=record, record_id=record_id, field=field, value=value,
                    wall_ms=stamp.wall_ms, counter=stamp.counter, device=ident.device, seq=seq, parents=parents)
        top = conn.execute(sa.select(sa.func.max(field_version.c.log_seq))).scalar() or 0
        insert_versions(conn, [v], next_log_seq=top + 1)
        save_identity(conn, ident)
        materialize(conn, [(record, record_id)])
        store.mark_changed()
        still = conn.execute(sa.select(open_conflict.c.kind).where(
            open_conflict.c.record == record, open_conflict.c.record_id == record_id, open_conflict.c.field == field)).scalar()
    return {"version": v.id, "value": value, "kind": listed, "still_open": still}


def _check_renumbering(store: ServerStore, conn: sa.Connection, find_id: Any, value: Any, *, confirm_far: bool) -> None:
    """A new find number: whole, within 1..2^53 - 1, and not far above the issued blocks unless confirmed."""
    from .store import far_number

    if not isinstance(value, int) or isinstance(value, bool) or not 1 <= value <= MAX_JSON_INT:
        shown = json.dumps(value, ensure_ascii=False)
        raise RecordInvalid("find", [FieldProblem(
            "number", f"the new number {shown[:60]} for find {find_id} is not a whole number from 1 to {MAX_JSON_INT}",
            "type the find's new number as digits only, e.g. 1234")])
    if confirm_far:
        return
    block_size = store.block_size()
    highest = far_number(conn, value, block_size=block_size)
    if highest is not None:
        raise NumberTooFar(f"find {find_id} cannot be renumbered to {value}", value, highest, block_size,
                           "Give it a number inside the issued blocks (a free one from a tablet's block)")


def list_pending(store: ServerStore, *, limit: int = 500) -> dict[str, Any]:
    """Records held here whose visible row cannot be written yet, each with its reason and what it waits for
    (``schema.sync.replica``: a missing parent record, an update of Baulk, or a corrected value)."""
    with store.read() as conn:
        total = int(conn.execute(sa.select(sa.func.count()).select_from(pending_row)).scalar_one())
        rows = conn.execute(sa.select(pending_row).order_by(pending_row.c.record, pending_row.c.record_id)
                            .limit(limit)).all()
    return {"data": [{"record": r.record, "record_id": str(r.record_id), "reason": r.reason,
                      "waits_for": r.waits_for} for r in rows], "count": total}
