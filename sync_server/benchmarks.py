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


def _template(work: Path, *, block: int) -> tuple[Path, Any, Any, str]:
    """A server store file with the demo site set up and TAB-1 enrolled with one block of ``block`` numbers:
    (path, demo site, device, token)."""
    template = work / "template.sqlite"
    demo = build_site()
    with ServerStore.open(f"sqlite:///{template}") as server:
        with server.atomic():
            for r in demo.setup_records():
                server.add(r)
        device, token = server.add_device(label="TAB-1", role="recorder")
        server.issue_number_block(device_id=device.id, size=block)
    return template, demo, device, token


def _setup(size: int, work: Path) -> dict[str, Any]:
    template, demo, device, _token = _template(work, block=10**6)
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


# -- sync.pending: a push into a store holding many unrelated pending rows vs the same push into one with none --
_PENDING_PUSH_FINDS = 20


def _setup_pending(size: int, work: Path) -> dict[str, Any]:
    """Two stores alike (the site, TAB-1 with a block) but for ``size`` pending rows, in one of them, of a record
    type this Baulk does not know (a newer tablet's), and the batch of 20 finds each repeat pushes."""
    from schema.sync import version_id

    from .sync import MAX_BATCH

    demo = build_site()
    quiet, pending = work / "quiet.sqlite", work / "pending.sqlite"
    with ServerStore.open(f"sqlite:///{quiet}") as server:
        with server.atomic():
            for r in demo.setup_records():
                server.add(r)
        device, _token = server.add_device(label="TAB-1", role="recorder")
        server.issue_number_block(device_id=device.id, size=10**6)
        newer, _token = server.add_device(label="TAB-NEW", role="recorder")
    shutil.copy(quiet, pending)
    rows = [Version(id=version_id(newer.id, k), record="soil_profile", record_id=uuid.UUID(int=k), field="depth_m",
                    value=1.5, wall_ms=1_700_000_000_000 + k, counter=0, device=newer.id, seq=k, schema_version=2)
            for k in range(1, size + 1)]
    with ServerStore.open(f"sqlite:///{pending}", upgrade=False) as server:
        for b, i in enumerate(range(0, len(rows), MAX_BATCH), start=1):
            chunk = rows[i:i + MAX_BATCH]
            ack = apply_push(server, device=newer, batch=b, content_hash=batch_hash(chunk), versions=chunk)
    assert ack["pending_rows"] == size
    versions = _versions(demo, _PENDING_PUSH_FINDS, device.id)
    return {"templates": {"quiet": quiet, "pending": pending}, "device": device, "versions": versions,
            "hash": batch_hash(versions), "report": {"pending_rows": size}}


def _push_into(state: dict[str, Any], work: Path, i: int, tag: str) -> float:
    import time

    path = work / f"{tag}-{i}.sqlite"
    shutil.copy(state["templates"][tag], path)
    versions = state["versions"]
    with ServerStore.open(f"sqlite:///{path}", upgrade=False) as store:
        t0 = time.perf_counter()
        ack = apply_push(store, device=state["device"], batch=1, content_hash=state["hash"], versions=versions)
        took = time.perf_counter() - t0
    assert ack["applied"] == len(versions) and ack["pending_rows"] == state["report"]["pending_rows"] * (tag == "pending")
    path.unlink()
    return took


benchmark(Bench(
    name="sync.pending", baseline_name="the same push with no pending rows", sizes=(2000, 20_000),
    setup=_setup_pending, subject=lambda s, w, i: _push_into(s, w, i, "pending"),
    baseline=lambda s, w, i: _push_into(s, w, i, "quiet"), repeats=5,
    doc="a push of 20 finds into a store holding n unrelated pending rows (a newer Baulk's record type) vs none; "
        "goal ratio ~1 (pending rows are retried only when what they wait for arrives)",
))


# -- bundle.import_memory: `baulk bundle import` of a big legitimate bundle, its peak memory over an idle one ------
# Each child prints its seconds and its own peak resident memory (VmHWM: the high-water mark of its address space
# since exec; ru_maxrss would also count the forking benchmark process it was copied from).
_PEAK = """
def _peak_mb():
    try:
        with open("/proc/self/status") as fh:
            return next(int(line.split()[1]) for line in fh if line.startswith("VmHWM:")) / 1024
    except (OSError, StopIteration):
        import resource
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
"""
_IDLE = _PEAK + """
import sys
import sync_server.bundles, sync_server.cli, sync_server.sync
from sync_server.store import ServerStore
ServerStore.open(sys.argv[1], create=False).close()
print(0.0, _peak_mb())
"""
_IMPORT = _PEAK + """
import sys, time
from sync_server.cli import cli
t0 = time.perf_counter()
cli(["bundle", "import", sys.argv[2], "--db", sys.argv[1]], standalone_mode=False)
print(time.perf_counter() - t0, _peak_mb())
"""
_PLAIN = _PEAK + """
import json, sys, time, uuid
import sync_server.bundles, sync_server.cli
from schema.records import Device
from schema.sync import Version, batch_hash
from sync_server.store import ServerStore
from sync_server.sync import apply_push
t0 = time.perf_counter()
with ServerStore.open(sys.argv[1], create=False) as store:
    device = store.get(Device, uuid.UUID(sys.argv[3]))
    with store.atomic(), open(sys.argv[2]) as fh:
        for line in fh:
            number, raw = json.loads(line)
            versions = [Version.model_validate(v, strict=False) for v in raw]
            apply_push(store, device=device, batch=number, content_hash=batch_hash(versions), versions=versions)
print(time.perf_counter() - t0, _peak_mb())
"""


def _child(code: str, *args: str, log: Path) -> tuple[float, float]:
    """Run ``code`` in a fresh interpreter; returns (its seconds, its peak resident memory in MB), both printed by
    the child on its last line."""
    import subprocess
    import sys

    with open(log, "w") as err:
        done = subprocess.run([sys.executable, "-c", code, *args], stdout=subprocess.PIPE, stderr=err, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"benchmark child failed ({done.returncode}): {log.read_text()[-2000:]}")
    seconds, peak = done.stdout.decode().strip().splitlines()[-1].split()
    return float(seconds), float(peak)


def _setup_import(size: int, work: Path) -> dict[str, Any]:
    """A store with the site and an enrolled TAB-1; a bundle of ``size`` finds from it (batches of 500 versions,
    as a tablet cuts them), and the same batches as plain JSON lines for the baseline."""
    import json

    from schema.sync.bundle import write_bundle

    template, demo, device, token = _template(work, block=10**7)
    versions = _versions(demo, size, device.id)
    batches = [(n, versions[i:i + 500]) for n, i in enumerate(range(0, len(versions), 500), start=1)]
    bundle = work / "day.baulkbundle"
    write_bundle(bundle, device=device.id, label="TAB-1", token=token, batches=batches)
    plain = work / "day.jsonl"
    inflated = 0
    with open(plain, "w") as fh:
        for n, vs in batches:
            line = json.dumps([n, [v.model_dump(mode="json") for v in vs]])
            inflated += len(line)
            fh.write(line + "\n")
    idle_path = work / "idle.sqlite"
    shutil.copy(template, idle_path)
    _s, idle = _child(_IDLE, f"sqlite:///{idle_path}", log=work / "idle.log")
    return {"template": template, "bundle": bundle, "plain": plain, "device": str(device.id), "idle": idle,
            "peaks": {"subject": [], "baseline": []},
            "report": {"finds": size, "versions": len(versions), "bundle_file_mb": round(bundle.stat().st_size / 2**20, 1),
                       "versions_mb": round(inflated / 2**20, 1), "idle_mb": round(idle, 1)}}


def _import_child(state: dict[str, Any], work: Path, i: int, tag: str) -> float:
    path = work / f"{tag}-{i}.sqlite"
    shutil.copy(state["template"], path)
    url = f"sqlite:///{path}"
    if tag == "subject":
        took, peak = _child(_IMPORT, url, str(state["bundle"]), log=work / f"{tag}.log")
    else:
        took, peak = _child(_PLAIN, url, str(state["plain"]), state["device"], log=work / f"{tag}.log")
    state["peaks"][tag].append(peak)
    with ServerStore.open(url, upgrade=False) as store:
        assert store.count(Find) == state["report"]["finds"], "every find of the bundle must be imported"
    path.unlink()
    return took


def _import_report(state: dict[str, Any], _work: Path) -> None:
    for tag in ("subject", "baseline"):
        state["report"][f"{tag}_peak_over_idle_mb"] = round(max(state["peaks"][tag]) - state["idle"], 1)


benchmark(Bench(
    name="bundle.import_memory", baseline_name="apply_push of the same batches from plain JSON lines",
    sizes=(900, 9000), setup=_setup_import, subject=lambda s, w, i: _import_child(s, w, i, "subject"),
    baseline=lambda s, w, i: _import_child(s, w, i, "baseline"), repeats=1, after=_import_report,
    doc="`baulk bundle import` of a bundle of n finds (about 50 MB of versions full, 5 MB quick), in its own "
        "process; goal: peak memory <= idle + 150 MB (subject_peak_over_idle_mb <= 150; batches are read one at a time)",
))
