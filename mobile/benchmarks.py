"""Tablet benchmarks for ``baulk bench``."""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
import time
from pathlib import Path
from typing import Any

from schema import db
from schema.benchkit import Bench, benchmark
from schema.demo_site import build_site, plan_finds
from schema.records import Device, Find, NumberBlock

from .store import TabletStore

REPEATS = 3


def _fresh_store(demo: Any, path: Path) -> TabletStore:
    store = TabletStore.open(path)
    device = Device(label="TAB-1", role="recorder")
    with store.atomic():
        store.set_identity(device=device)
        store.add_number_block(block=NumberBlock(
            device_id=device.id, first=1, last=10**6, issued_at=dt.datetime.now(dt.timezone.utc)))
        for record in demo.setup_records():
            store.add(record)
    return store


def _plain(value: Any) -> Any:
    if isinstance(value, list):
        return json.dumps(value)
    if value is None or isinstance(value, (int, float, str)):
        return value
    return str(value)


def _bare_table(path: Path, cols: list[str]) -> sqlite3.Connection:
    conn = sqlite3.connect(path, isolation_level=None)
    for name, value in db.SQLITE_PRAGMAS:
        conn.execute(f"PRAGMA {name}={value}")
    conn.execute(f"CREATE TABLE find ({', '.join(cols)})")
    return conn


def _setup_save(size: int, work: Path) -> dict[str, Any]:
    """Finds of the demo plan (samples left out: they need details), a fresh store and bare table per repeat."""
    demo = build_site()
    plan = plan_finds(demo, label="TAB-1", first_number=1, count=size, seed=5)
    finds = [f for f in plan.finds if f["category"] != "sample"]
    rows = [[_plain(v) for v in db.to_row(Find.model_validate(f)).values()] for f in finds]
    cols = list(db.to_row(Find.model_validate(finds[0])))
    return {
        "finds": finds,
        "rows": rows,
        "sql": f"INSERT INTO find ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
        "stores": [_fresh_store(demo, work / f"subject-{i}.sqlite") for i in range(REPEATS)],
        "bare": [_bare_table(work / f"baseline-{i}.sqlite", cols) for i in range(REPEATS)],
        "report": {"finds_per_run": len(finds)},
    }


def _save_finds(state: dict[str, Any], _work: Path, i: int) -> None:
    store = state["stores"][i]
    for data in state["finds"]:
        store.save_find(find=data)


def _bare_insert(state: dict[str, Any], _work: Path, i: int) -> None:
    """The same rows by a bare sqlite3 INSERT, one transaction per find, same pragmas (WAL, synchronous=FULL)."""
    conn = state["bare"][i]
    for row in state["rows"]:
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(state["sql"], row)
        conn.execute("COMMIT")


benchmark(Bench(
    name="store.save_find",
    baseline_name="sqlite3 insert, 1 txn/row",
    sizes=(150, 1500),
    setup=_setup_save,
    subject=_save_finds,
    baseline=_bare_insert,
    repeats=REPEATS,
    doc="tablet store save_find (validate, number check, insert in a savepoint) vs a bare sqlite3 insert",
))


# -- the tablet with a season's finds already on it -----------------------------------------------------------
NEW_FINDS = 200  # saves timed one by one for the p95


def _prefilled(demo: Any, path: Path, count: int) -> list[dict[str, Any]]:
    """A tablet file holding ``count`` finds with their versions (written in one transaction, as a season of
    syncs would leave them); returns the finds still to be saved (numbers after those)."""
    store = _fresh_store(demo, path)
    plan = plan_finds(demo, label="TAB-1", first_number=1, count=int(count * 1.3) + 2 * NEW_FINDS, seed=11)
    finds = [f for f in plan.finds if f["category"] != "sample"]  # samples need their details: left out here
    assert len(finds) >= count + NEW_FINDS
    with store.atomic() as conn:
        for data in finds[:count]:
            store.save_versioned(conn, Find.model_validate(data), new=True)
    store.close()
    return finds[count:count + NEW_FINDS]


def _p95(values: list[float]) -> float:
    ordered = sorted(values)
    return round(ordered[min(len(ordered) - 1, int(0.95 * len(ordered)))] * 1000, 2)


def _setup_full_save(size: int, work: Path) -> dict[str, Any]:
    import shutil

    demo = build_site()
    todo = _prefilled(demo, work / "prefilled.sqlite", size)
    cols = list(db.to_row(Find.model_validate(todo[0])))
    rows = [[_plain(v) for v in db.to_row(Find.model_validate(f)).values()] for f in todo]
    old = [[_plain(v) for v in db.to_row(Find.model_validate({**todo[0], "number": n + 1})).values()] for n in range(size)]
    sql = f"INSERT INTO find ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})"
    stores, bare = [], []
    for i in range(REPEATS):
        shutil.copy(work / "prefilled.sqlite", work / f"subject-{i}.sqlite")
        stores.append(TabletStore.open(work / f"subject-{i}.sqlite"))
        conn = _bare_table(work / f"baseline-{i}.sqlite", cols)
        conn.execute("CREATE INDEX ix_number ON find (number)")
        conn.execute("BEGIN")
        conn.executemany(sql, [[f"old{i}-{k}", *r[1:]] for k, r in enumerate(old)])
        conn.execute("COMMIT")
        bare.append(conn)
    return {"finds": todo, "rows": rows, "sql": sql, "stores": stores, "bare": bare, "subject_times": [],
            "baseline_times": [], "report": {"finds_in_store": size, "saves_timed": len(todo)}}


def _save_one_by_one(state: dict[str, Any], _work: Path, i: int) -> float:
    store, total = state["stores"][i], 0.0
    for data in state["finds"]:
        t0 = time.perf_counter()
        store.save_find(find=data)
        took = time.perf_counter() - t0
        state["subject_times"].append(took)
        total += took
    return total


def _insert_one_by_one(state: dict[str, Any], _work: Path, i: int) -> float:
    conn, total = state["bare"][i], 0.0
    for row in state["rows"]:
        t0 = time.perf_counter()
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(state["sql"], row)
        conn.execute("COMMIT")
        took = time.perf_counter() - t0
        state["baseline_times"].append(took)
        total += took
    return total


def _p95_report(state: dict[str, Any], _work: Path) -> None:
    state["report"]["save_p95_ms"] = _p95(state["subject_times"])
    state["report"]["bare_insert_p95_ms"] = _p95(state["baseline_times"])


benchmark(Bench(
    name="tablet.save_find",
    baseline_name="sqlite3 insert into the same-sized table, 1 txn/row",
    sizes=(5000, 50000),
    setup=_setup_full_save,
    subject=_save_one_by_one,
    baseline=_insert_one_by_one,
    repeats=REPEATS,
    after=_p95_report,
    doc=f"save_find of {NEW_FINDS} finds, one at a time, into a tablet already holding n finds; save_p95_ms (goal <= 5)",
))


def _setup_list(size: int, work: Path) -> dict[str, Any]:
    demo = build_site()
    _prefilled(demo, work / "listed.sqlite", size)
    store = TabletStore.open(work / "listed.sqlite")
    bare = sqlite3.connect(work / "listed.sqlite")
    return {"store": store, "bare": bare, "site_id": demo.site.id, "report": {"finds_in_store": size}}


def _open_list(state: dict[str, Any], _work: Path, _i: int) -> float:
    from .controllers import FindFilter, FindListController

    listing = FindListController(state["store"])
    shown = FindFilter(site_id=state["site_id"])
    t0 = time.perf_counter()  # what the Finds screen does when it opens: the count and the first page
    total = listing.count(shown)
    page = listing.rows(shown, limit=500)
    took = time.perf_counter() - t0
    assert total == state["report"]["finds_in_store"] and len(page) == 500
    state.setdefault("opens", []).append(took)
    t0 = time.perf_counter()
    assert len(listing.rows(shown)) == total
    state.setdefault("whole", []).append(time.perf_counter() - t0)
    return took


def _slowest_open(state: dict[str, Any], _work: Path) -> None:
    state["report"]["open_ms"] = round(max(state["opens"]) * 1000, 1)  # the slowest repeat, first (cold) included
    state["report"]["all_rows_ms"] = round(max(state["whole"]) * 1000, 1)  # every row at once, for reference


def _bare_select(state: dict[str, Any], _work: Path, _i: int) -> None:
    bare, site = state["bare"], state["site_id"].hex
    bare.execute("SELECT count(*) FROM find WHERE site_id = ?", (site,)).fetchone()
    bare.execute("SELECT id, number, unit_id, category, material, recovery, found_at, voided, label_printed_at "
                 "FROM find WHERE site_id = ? ORDER BY number DESC LIMIT 500", (site,)).fetchall()


benchmark(Bench(
    name="tablet.find_list",
    baseline_name="sqlite3 count and first 500 rows of the same columns",
    sizes=(5000, 50000),
    setup=_setup_list,
    subject=_open_list,
    baseline=_bare_select,
    repeats=REPEATS,
    after=_slowest_open,
    doc="opening the find list over n finds: the count and the first 500 rows (unit codes, open checks, row text); "
        "open_ms (goal <= 300)",
))
