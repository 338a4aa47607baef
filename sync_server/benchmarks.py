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



# -- export.horizon_counts: the per-horizon tallies in the database vs pandas over the same rows in memory ------
def _setup_counts(size: int, work: Path) -> dict[str, Any]:
    import random

    import pandas as pd

    from schema.records import Horizon, Unit
    from schema.tables import metadata

    demo = build_site()
    store = ServerStore.open(f"sqlite:///{work / 'counts.sqlite'}")
    with store.atomic():
        for r in demo.setup_records():
            store.add(r)
    units = store.list(Unit)
    horizon_code = {h.id: h.code for h in store.list(Horizon)}
    rng = random.Random(4)
    materials = {"artifact": ["obsidian", "chert", "basalt"], "fossil": ["bone", "tooth"], "sample": ["sediment"]}
    rows, frame = [], {"horizon": [], "category": [], "material": [], "recovery": [], "count": []}
    for i in range(size):
        u = units[i % len(units)]
        cat = rng.choice(["artifact", "artifact", "fossil", "sample"])
        mat, rec, n = rng.choice(materials[cat]), rng.choice(["plotted", "sieved"]), rng.randint(1, 3)
        rows.append({"id": uuid.UUID(int=i + 1), "number": i + 1, "site_id": demo.site.id, "season_id": demo.season.id,
                     "trench_id": u.trench_id, "unit_id": u.id, "category": cat, "material": mat, "count": n,
                     "recovery": rec, "position_source": "none", "found_at": dt_now(), "recorder": "AK", "notes": "",
                     "photo_hashes": [], "voided": False, "human_remains": False})
        frame["horizon"].append(horizon_code.get(u.horizon_id, "") if u.horizon_id else "")
        for k, v in (("category", cat), ("material", mat), ("recovery", rec), ("count", n)):
            frame[k].append(v)
    with store.engine.begin() as conn:
        conn.execute(metadata.tables["find"].insert(), rows)
    df = pd.DataFrame(frame)
    return {"store": store, "site": demo.site.id, "df": df, "report": {"finds": size}}


def dt_now() -> Any:
    import datetime as dt

    return dt.datetime(2026, 7, 3, 9, 30, tzinfo=dt.timezone.utc)


def _counts_db(state: dict[str, Any], work: Path, i: int) -> None:
    from .export_sql import tally_in_db

    with state["store"].read() as conn:
        out = tally_in_db(conn, site_id=state["site"])
    assert sum(t.finds for t in out.values()) == state["report"]["finds"]


def _counts_pandas(state: dict[str, Any], work: Path, i: int) -> None:
    g = state["df"].groupby(["horizon", "category", "material", "recovery"]).agg(
        finds=("count", "size"), items=("count", "sum"))
    assert int(g["finds"].sum()) == state["report"]["finds"]


benchmark(Bench(
    name="export.horizon_counts", baseline_name="pandas groupby over the same rows in memory", sizes=(100_000, 1_000_000),
    setup=_setup_counts, subject=_counts_db, baseline=_counts_pandas, repeats=REPEATS,
    doc="per-horizon x category x material x recovery tallies computed by SQLite; goal ratio <= 1.0",
))
