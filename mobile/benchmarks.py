"""Tablet benchmarks for ``baulk bench``."""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
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
