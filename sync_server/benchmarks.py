"""Server benchmarks for ``baulk bench``: merging pushed versions, and replaying an applied batch."""

from __future__ import annotations

import shutil
import uuid
from pathlib import Path
from typing import Any

from schema.benchkit import Bench, benchmark
from schema.demo_site import build_site, plan_finds
from schema.records import Find
from schema.sync import Clock, Version, batch_hash
from schema.sync.replica import Identity, versions_for_edit
from schema.sync.tables import field_version

from .store import ServerStore
from .sync import apply_push

REPEATS = 3


def _versions(demo: Any, n: int, device: uuid.UUID, *, first_number: int = 1) -> list[Version]:
    plan = plan_finds(demo, label="TAB-1", first_number=first_number, count=n, seed=9)
    ident = Identity(device, 0, Clock())
    out: list[Version] = []
    for f in plan.finds:
        f = {k: v for k, v in f.items()}
        record = Find.model_validate({**f, "device_id": device})
        out.extend(versions_for_edit(None, ident, record, new=True))  # type: ignore[arg-type]
    return out


def _setup(size: int, work: Path) -> dict[str, Any]:
    template = work / "template.sqlite"
    demo = build_site()
    with ServerStore.open(f"sqlite:///{template}") as server:
        with server.atomic():
            for r in demo.setup_records():
                server.add(r)
        device, _token = server.add_device(label="TAB-1", role="recorder")
        server.issue_number_block(device_id=device.id, size=10**6)
    versions = _versions(demo, size, device.id)
    rows = [{**v.model_dump(mode="json"), "record_id": v.record_id, "device": v.device, "parents": list(v.parents),
             "batch": 1, "log_seq": None} for v in versions]
    return {"template": template, "device": device, "versions": versions, "hash": batch_hash(versions),
            "rows": rows, "report": {"versions": len(versions), "finds": size}, "demo": demo}


def _fresh(state: dict[str, Any], work: Path, i: int, tag: str) -> ServerStore:
    path = work / f"{tag}-{i}.sqlite"
    shutil.copy(state["template"], path)
    return ServerStore.open(f"sqlite:///{path}", upgrade=False)


def _merge(state: dict[str, Any], work: Path, i: int) -> None:
    store = _fresh(state, work, i, "merge")
    ack = apply_push(store, device=state["device"], batch=1, content_hash=state["hash"], versions=state["versions"])
    assert ack["pending_rows"] == 0, "every pushed find must become a visible row"
    store.close()


def _raw_insert(state: dict[str, Any], work: Path, i: int) -> None:
    """The same version rows by one SQLAlchemy Core insert in one transaction (no merge, no rows rebuilt)."""
    store = _fresh(state, work, i, "raw")
    with store.engine.begin() as conn:
        conn.execute(field_version.insert(), state["rows"])
    store.close()


def _replay(state: dict[str, Any], work: Path, i: int) -> None:
    store = state["applied"][i]
    ack = apply_push(store, device=state["device"], batch=1, content_hash=state["hash"], versions=state["versions"])
    assert ack["replayed"]


def _setup_replay(size: int, work: Path) -> dict[str, Any]:
    state = _setup(size, work)
    state["applied"] = {}
    return state


def _first_apply(state: dict[str, Any], work: Path, i: int) -> None:
    store = _fresh(state, work, i, "first")
    apply_push(store, device=state["device"], batch=1, content_hash=state["hash"], versions=state["versions"])
    state["applied"][i] = store


benchmark(Bench(
    name="sync.merge", baseline_name="one-txn Core insert of the same rows", sizes=(200, 2000), setup=_setup,
    subject=_merge, baseline=_raw_insert, repeats=REPEATS,
    doc="server applies a push (versions inserted once, rows rebuilt, conflicts kept) vs a raw insert; goal ratio <= 2",
))

benchmark(Bench(
    name="sync.replay", baseline_name="applying the batch the first time", sizes=(200, 2000), setup=_setup_replay,
    subject=_replay, baseline=_first_apply, repeats=REPEATS,
    doc="the same batch sent again (answered from its stored ack) vs applying it; goal ratio <= 0.1",
))

