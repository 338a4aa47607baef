"""Importing a tablet's bundle on the camp server: checked whole, then applied through the same code path as
a push, all batches in one transaction (so a failure part-way changes nothing). The batches are read from the
file one at a time (after the check, each again), so memory does not grow with the bundle's size."""

from __future__ import annotations

import uuid
from pathlib import Path
from typing import Any

from schema.records import Device
from schema.sync.bundle import open_bundle

from .store import ServerStore
from .sync import apply_push

__all__ = ["import_bundle"]


def import_bundle(store: ServerStore, path: Path) -> dict[str, Any]:
    """Apply every batch of the bundle once (batches already applied by a push are answered from their ack).

    ``refused`` lists the versions of newly applied batches the server would not take from this device (set-up
    records only a manager writes; see ``sync_server.sync.apply_push``), each with its reason."""

    def token_hash_of(device_id: uuid.UUID) -> str | None:
        found = store.list(Device, id=device_id)
        return found[0].token_hash if found and found[0].revoked_at is None else None

    acks = []
    with open_bundle(path, token_hash_of) as bundle:  # checked whole here; batches are read again one at a time
        device = store.get(Device, bundle.device)
        with store.atomic():
            for number, versions, content_hash in bundle.batches():
                acks.append(apply_push(store, device=device, batch=number, content_hash=content_hash,
                                       versions=versions))
    fresh = [a for a in acks if not a["replayed"]]
    return {"device": device.label, "batches": len(acks), "applied": sum(a["applied"] for a in fresh),
            "replayed": len(acks) - len(fresh), "refused": [r for a in fresh for r in a["refused"]], "acks": acks}
