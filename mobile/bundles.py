"""Exporting a bundle on the tablet: every batch the server has not acknowledged, in one sealed file."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from schema.errors import StoreError
from schema.records import Device
from schema.sync.bundle import write_bundle

from . import outbox
from .store import TabletStore

__all__ = ["export_bundle"]


def export_bundle(store: TabletStore, out: Path, *, batch_size: int = 500) -> dict[str, Any]:
    """Write the unacknowledged batches to ``out`` (a folder gets a dated file name); returns the manifest."""
    device_id, token = store.device_id(), store.token()
    if device_id is None or token is None:
        raise StoreError("this tablet is not enrolled (no device or token); enrol it with the camp server first")
    outbox.cut_batches(store, size=batch_size)
    batches = [(n, outbox.batch_versions(store, n)) for n in outbox.unacked_batches(store)]
    label = store.get(Device, device_id).label
    out = Path(out)
    if out.is_dir():
        import datetime as dt

        out = out / f"{label}-{dt.datetime.now(dt.timezone.utc):%Y%m%dT%H%M%SZ}.baulkbundle"
    manifest = write_bundle(out, device=device_id, label=label, token=token, batches=batches)
    return {"path": str(out), **manifest}
