"""The tablet app killed mid-save: a child process records finds through the same controller the Record screen
calls (a sample with its details and its raw shot, so four records and their versions per save) and is sent
SIGKILL at a random moment. Every find it reported saved is there; no find lacks its shot, its sample details or
its versions; SQLite's own integrity check passes (stdlib ``sqlite3``, not Baulk's store)."""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
TRIALS = int(os.environ.get("BAULK_KILL_TRIALS", "12"))

CHILD = r"""
import sys
from mobile.controllers import FindController, Position
from mobile.instruments import ShotSimulator
from mobile.store import TabletStore
from schema.demo_site import build_site
from tests.helpers import start_field_day

store = TabletStore.open(sys.argv[1])
demo = build_site()
from schema.records import Site
demo.site = store.list(Site)[0]
days, truth = start_field_day(store, demo)
finds = FindController(store, days)
sim = ShotSimulator(truth)
i = 0
while True:
    i += 1
    saved = finds.record(category="sample", values={"material": "sediment", "purpose": "pollen", "container": "bag",
                                                    "mass_g": "50"},
                         position=Position("shot", shot_line=sim.shot_line(1001 + (i % 20) * 0.1, 2001.5, 99.8)))
    print(f"saved {saved.find.id}", flush=True)
"""


def _prepare(path: Path) -> None:
    from schema.demo_site import build_site
    from tests.helpers import demo_tablet

    demo_tablet(path, build_site(), label="TAB-K", last=100000).close()


@pytest.mark.slow
def test_killed_mid_save_loses_nothing_acknowledged_and_leaves_nothing_half_written(tmp_path: Path) -> None:
    path = tmp_path / "tablet.sqlite"
    _prepare(path)
    rng = random.Random(20261202)
    acknowledged: set[str] = set()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for _trial in range(TRIALS):
        child = subprocess.Popen([sys.executable, "-c", CHILD, str(path)], stdout=subprocess.PIPE, text=True, env=env,
                                 cwd=ROOT)
        assert child.stdout is not None
        want = rng.randint(1, 6)
        seen = 0
        while seen < want:
            line = child.stdout.readline()
            assert line, f"the child stopped early (exit {child.poll()})"
            acknowledged.add(line.split()[1].replace("-", ""))
            seen += 1
        time.sleep(rng.uniform(0, 0.02))  # land somewhere inside the next save
        child.send_signal(signal.SIGKILL)
        rest, _ = child.communicate()
        acknowledged |= {ln.split()[1].replace("-", "") for ln in rest.splitlines() if ln.startswith("saved ")}

        conn = sqlite3.connect(path)
        try:
            assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            finds = {r[0] for r in conn.execute("SELECT id FROM find")}
            assert acknowledged <= finds, "a find reported saved is missing"
            orphans = conn.execute(
                "SELECT count(*) FROM find f WHERE NOT EXISTS (SELECT 1 FROM sample s WHERE s.find_id = f.id) "
                "OR NOT EXISTS (SELECT 1 FROM shot WHERE shot.id = f.shot_id) "
                "OR NOT EXISTS (SELECT 1 FROM field_version v WHERE v.record_id = f.id)").fetchone()[0]
            assert orphans == 0, "a find was written without its sample, shot or versions"
            loose = conn.execute("SELECT count(*) FROM shot WHERE id NOT IN (SELECT shot_id FROM find WHERE shot_id IS NOT NULL) "
                                 "AND id NOT IN (SELECT shot_id FROM level_point WHERE shot_id IS NOT NULL)").fetchone()[0]
            assert loose == 0, "a shot was written without the find it positions"
        finally:
            conn.close()
    assert len(acknowledged) >= TRIALS
