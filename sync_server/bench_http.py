"""End-to-end sync benchmark (``baulk bench sync.http``): 20 simulated tablets sync at once over loopback HTTP
with a real ``baulk serve`` process.

Each simulated tablet is a thread with its own HTTP client and device token: it pushes the batches a tablet
would cut (500 versions each, the tablet's default) and after each one pulls a page after its cursor; once every
tablet's pushes are in (the timed part ends there), each pulls on until caught up. As a tablet does, a request
whose connection dropped is sent again (a push again is answered from its stored acknowledgement); every retry is
counted (``retries``). The run fails on any answer other than 200, on a tablet thread that stops, on a pull that
serves a version twice, and when the server ends up with other than every version sent. As a tablet's
(``mobile.sync``), push bodies go gzip-compressed and the server gzips its answers. Body bytes each way are
counted per tablet as they went on the wire: ``tablet_sent_mb``, ``tablet_received_mb`` (medians); the same
bodies as plain JSON, as they went before compression: ``tablet_sent_plain_mb``, ``tablet_received_plain_mb``;
and ``tablet_received_before_mb``, what the tablet would have received as plain JSON had the pulls sent its own
versions back too, as they did before issue 16 (the versions left out, ``own_left_out``, at their mean JSON
size).
``server_tracebacks`` counts the errors in the server's log (a retry with none beside it is a dropped connection);
``client_gc_max_ms`` is the longest garbage collection of this process (it stops every tablet thread at once).
The server runs in its own process, so its
memory is its own: the report gives its resident memory when idle and its peak (``VmHWM``) during the run.
The baseline is one SQLAlchemy Core insert of the same version rows in one transaction (no HTTP, no merge).
Linearity: after the timed runs the same job is run with half the finds per tablet; ``growth_2x`` is the
full time over the half time (goal <= 2.2). Request latencies give ``push_p50_ms``, ``push_p95_ms``,
``pull_p50_ms`` and ``pull_p95_ms``.
"""

from __future__ import annotations

import gzip
import json
import os
import shutil
import statistics
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

from schema.benchkit import Bench, benchmark
from schema.demo_site import build_site
from schema.sync import batch_hash
from schema.sync.tables import field_version

from .limits import COMPRESS_ANSWERS
from .loopback import free_port
from .store import ServerStore

TABLETS = 20
BATCH = 500
PAGE = 500
RETRIES = 5  # a request whose connection dropped is tried again this many times, as a tablet would
KEEPALIVE_S = 5.0  # an idle connection is reused this long, as a tablet's (mobile.sync.KEEPALIVE_S); the server
# keeps one open for app.KEEP_ALIVE_S, far longer, so no request is sent on a connection it is closing


def _rss_kb(pid: int) -> dict[str, int]:
    out = {}
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        key, _, rest = line.partition(":")
        if key in ("VmRSS", "VmHWM"):
            out[key] = int(rest.split()[0])
    return out


def _workload(demo: Any, devices: list[tuple[Any, str, int]], per_tablet: int) -> list[dict[str, Any]]:
    from .benchmarks import _versions

    tablets = []
    for device, token, first in devices:
        versions = _versions(demo, per_tablet, device.id, first_number=first)
        bodies, plain, counts = [], [], []
        for n, i in enumerate(range(0, len(versions), BATCH), start=1):
            chunk = versions[i:i + BATCH]
            body = json.dumps({"batch": n, "hash": batch_hash(chunk),
                               "versions": [json.loads(v.canonical()) for v in chunk]}).encode()
            bodies.append(gzip.compress(body, COMPRESS_ANSWERS["compresslevel"]))  # as mobile.sync sends it
            plain.append(len(body))
            counts.append(len(chunk))
        tablets.append({"token": token, "bodies": bodies, "plain": plain, "counts": counts, "versions": versions})
    return tablets


def _setup(size: int, work: Path) -> dict[str, Any]:
    template = work / "template.sqlite"
    demo = build_site()
    devices = []
    with ServerStore.open(f"sqlite:///{template}") as server:
        with server.atomic():
            for r in demo.setup_records():
                server.add(r)
        for k in range(TABLETS):
            device, token = server.add_device(label=f"TAB-{k + 1}", role="recorder")
            block = server.issue_number_block(device_id=device.id, size=size)
            devices.append((device, token, block.first))
    full = _workload(demo, devices, size)
    half = [{"token": t["token"], **{k: t[k][: max(1, len(t["bodies"]) // 2)] for k in ("bodies", "plain", "counts")}}
            for t in full]
    rows = [{**json.loads(v.canonical()), "record_id": v.record_id, "device": v.device, "batch": 1, "log_seq": None}
            for t in full for v in t["versions"]]
    version_bytes = statistics.mean(len(v.canonical()) for t in full for v in t["versions"])
    for t in full:
        del t["versions"]
    finds = TABLETS * size
    return {"template": template, "full": full, "half": half, "rows": rows, "version_bytes": version_bytes,
            "report": {"tablets": TABLETS, "finds": finds, "versions": len(rows), "runs": []}}


def _serve(db: Path, port: int, log: Path) -> subprocess.Popen[bytes]:
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    cmd = [sys.executable, "-m", "sync_server.cli", "serve", "--db", f"sqlite:///{db}", "--host", "127.0.0.1",
           "--port", str(port)]
    return subprocess.Popen(cmd, stdout=log.open("wb"), stderr=subprocess.STDOUT, env=env,
                            cwd=Path(__file__).resolve().parent.parent)


def run_e2e(state: dict[str, Any], work: Path, tag: str, tablets: list[dict[str, Any]]) -> dict[str, Any]:
    """Start a server on a copy of the template, let every tablet push all its batches at once, stop it."""
    import httpx

    import gc

    # The workload and the baseline's rows (1.85 M dicts at full size) live in this process: a full garbage
    # collection over them stops every tablet thread for about 5 s, as long as a connection's keep-alive, and
    # the tablets are not what is measured. Frozen objects are left out of collections.
    gc.freeze()
    pauses: list[float] = []  # this process's garbage collections during the run (client_gc_max_ms)
    started_gc: list[float] = []

    def gc_watch(phase: str, _info: dict[str, Any]) -> None:
        if phase == "start":
            started_gc[:] = [time.perf_counter()]
        elif started_gc:
            pauses.append(time.perf_counter() - started_gc[0])

    gc.callbacks.append(gc_watch)
    db = work / f"{tag}.sqlite"
    shutil.copy(state["template"], db)
    port = free_port()
    proc = _serve(db, port, work / f"{tag}.log")
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                if httpx.get(f"{base}/v1/status", timeout=2).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"the server did not start: {(work / f'{tag}.log').read_text()[-2000:]}")
            time.sleep(0.1)
        idle = _rss_kb(proc.pid)["VmRSS"]
        latencies: list[float] = []
        failures: list[str] = []
        lock = threading.Lock()

        pulls: list[float] = []

        retries: list[str] = []
        wire: list[dict[str, int]] = []

        def call(http: Any, method: str, url: str, **kw: Any) -> Any:
            """One request as a tablet makes it: a dropped connection is tried again (a push again is answered
            from its stored acknowledgement), each retry counted; after RETRIES the failure stands."""
            for attempt in range(RETRIES + 1):
                try:
                    return http.request(method, url, **kw)
                except httpx.TransportError as exc:
                    with lock:
                        retries.append(f"{method} {url}: {type(exc).__name__}: {exc}")
                    if attempt == RETRIES:
                        raise
                    time.sleep(0.2 * (attempt + 1))

        def pushes(http: Any, t: dict[str, Any], pull: Any, counts: dict[str, int]) -> None:
            """Push each batch, then pull one page after this tablet's cursor, as a syncing tablet does."""
            for body, plain in zip(t["bodies"], t["plain"]):
                t0 = time.perf_counter()
                r = call(http, "POST", "/v1/sync/push", content=body, headers={"content-encoding": "gzip"})
                counts["sent"] += len(body)
                counts["sent_plain"] += plain
                counts["received"] += r.num_bytes_downloaded
                counts["received_plain"] += len(r.content)
                t1 = time.perf_counter()
                page = pull()
                t2 = time.perf_counter()
                with lock:
                    latencies.append(t1 - t0)
                    pulls.append(t2 - t1)
                    for resp in (r, page):
                        if resp.status_code != 200:
                            failures.append(f"{resp.status_code}: {resp.text[:200]}")

        def tablet(t: dict[str, Any]) -> None:
            """The pushes (timed), then, once every tablet's are in, pull on until caught up (not timed). Counts
            the body bytes each way and the caller's own versions the pulls left out."""
            cursor, seen = 0, set()
            counts = {"sent": 0, "received": 0, "sent_plain": 0, "received_plain": 0, "own_left_out": 0, "pulled": 0}

            def pull() -> Any:
                nonlocal cursor
                page = call(http, "GET", "/v1/sync/pull", params={"after": cursor, "limit": PAGE})
                counts["received"] += page.num_bytes_downloaded  # gzip-compressed by the server
                counts["received_plain"] += len(page.content)
                if page.status_code != 200:
                    return page
                got = page.json()
                ids = [v["id"] for v in got["versions"]]
                if seen.intersection(ids) or len(set(ids)) != len(ids):
                    with lock:
                        failures.append("a pull served a version this tablet had already been given")
                seen.update(ids)
                counts["own_left_out"] += got.get("own_left_out", 0)
                counts["pulled"] += len(ids)
                cursor = got["next"]
                return page

            with httpx.Client(base_url=base, timeout=600, headers={"Authorization": f"Bearer {t['token']}",
                                                                   "content-type": "application/json"},
                              limits=httpx.Limits(keepalive_expiry=KEEPALIVE_S)) as http:
                try:
                    try:
                        pushes(http, t, pull, counts)
                    finally:
                        with pushing:
                            pushing_left[0] -= 1
                            pushing.notify_all()
                    pushed.wait()
                    while True:
                        page = pull()
                        if page.status_code != 200:
                            with lock:
                                failures.append(f"{page.status_code}: {page.text[:200]}")
                            break
                        if not page.json()["more"]:
                            break
                except Exception as exc:  # noqa: BLE001 - a tablet that dies fails the run, never silently
                    with lock:
                        failures.append(f"a tablet stopped: {type(exc).__name__}: {exc}")
                finally:
                    with lock:
                        wire.append(counts)

        pushed, pushing, pushing_left = threading.Event(), threading.Condition(), [len(tablets)]
        t0 = time.perf_counter()
        threads = [threading.Thread(target=tablet, args=(t,)) for t in tablets]
        for th in threads:
            th.start()
        with pushing:
            pushing.wait_for(lambda: pushing_left[0] == 0)
        elapsed = time.perf_counter() - t0  # the pushes (each with its pull page); the catch-up is not timed
        pushed.set()
        for th in threads:
            th.join()
        peak = _rss_kb(proc.pid)["VmHWM"]
    finally:
        gc.callbacks.remove(gc_watch)
        proc.terminate()
        proc.wait(timeout=60)
    if failures:
        log = (work / f"{tag}.log").read_text(errors="replace")
        raise RuntimeError(f"{len(failures)} requests failed ({len(retries)} retries), first: {failures[0]}; "
                           f"server log ends: {log[-3000:]}")
    import sqlalchemy as sa

    expected = sum(n for t in tablets for n in t["counts"])
    with ServerStore.open(f"sqlite:///{db}", upgrade=False) as check:
        with check.read() as conn:
            held = int(conn.execute(sa.select(sa.func.count()).select_from(field_version)
                                    .where(field_version.c.record == "find")).scalar_one())
    if held != expected:
        raise RuntimeError(f"the server holds {held} find versions; the tablets sent {expected}")
    tracebacks = (work / f"{tag}.log").read_text(errors="replace").count("Traceback (most recent call last)")
    return {"elapsed_s": elapsed, "idle_mb": idle / 1024, "peak_mb": peak / 1024, "latencies": latencies,
            "pulls": pulls, "retries": retries, "wire": wire, "server_tracebacks": tracebacks,
            "gc_max_s": max(pauses, default=0.0)}


def _subject(state: dict[str, Any], work: Path, i: int) -> float:
    run = run_e2e(state, work, f"full-{i}", state["full"])
    state["report"]["runs"].append(run)
    return float(run["elapsed_s"])  # the pushes only: not the server's start or the count check


def _baseline(state: dict[str, Any], work: Path, i: int) -> None:
    db = work / f"raw-{i}.sqlite"
    shutil.copy(state["template"], db)
    with ServerStore.open(f"sqlite:///{db}", upgrade=False) as store:
        with store.engine.begin() as conn:
            conn.execute(field_version.insert(), state["rows"])


def _after(state: dict[str, Any], work: Path) -> None:
    """Summarise the timed runs, then time the same job at half the data for the growth figure."""
    runs = state["report"].pop("runs")
    half_runs = [run_e2e(state, work, f"half-{k}", state["half"]) for k in range(len(runs))]
    halves = [r["elapsed_s"] for r in half_runs]
    wire = [w for r in runs for w in r["wire"]]
    mb = 1024 * 1024
    own_bytes = state["version_bytes"]  # a version as JSON, on average: what each left-out one would have cost
    state["report"].update({
        "tablet_sent_mb": round(statistics.median(w["sent"] for w in wire) / mb, 3),
        "tablet_received_mb": round(statistics.median(w["received"] for w in wire) / mb, 3),
        # the same bodies as plain JSON (before they were gzip-compressed for the wire)
        "tablet_sent_plain_mb": round(statistics.median(w["sent_plain"] for w in wire) / mb, 3),
        "tablet_received_plain_mb": round(statistics.median(w["received_plain"] for w in wire) / mb, 3),
        # before issue 16: plain JSON, and the pull sent the tablet's own versions back too (estimate: their size)
        "tablet_received_before_mb": round(statistics.median(w["received_plain"] + w["own_left_out"] * own_bytes
                                                             for w in wire) / mb, 3),
        "tablet_pulled_versions": int(statistics.median(w["pulled"] for w in wire)),
        "retries": sum(len(r["retries"]) for r in runs + half_runs),
        # errors the server logged (each answered 500 by limits.AnswerErrors, or a connection it had to close)
        "server_tracebacks": sum(r["server_tracebacks"] for r in runs + half_runs),
        # the longest stop of every tablet thread at once (a garbage collection in this process)
        "client_gc_max_ms": round(1000 * max(r["gc_max_s"] for r in runs + half_runs), 1),
    })
    lat = sorted(x for r in runs for x in r["latencies"])
    pulled = sorted(x for r in runs for x in r["pulls"])
    full = statistics.median(r["elapsed_s"] for r in runs)
    state["report"].update({
        "push_p50_ms": round(1000 * lat[len(lat) // 2], 1),
        "push_p95_ms": round(1000 * lat[min(len(lat) - 1, int(len(lat) * 0.95))], 1),
        "pull_p50_ms": round(1000 * pulled[len(pulled) // 2], 1),
        "pull_p95_ms": round(1000 * pulled[min(len(pulled) - 1, int(len(pulled) * 0.95))], 1),
        "server_idle_mb": round(max(r["idle_mb"] for r in runs), 1),
        "server_peak_over_idle_mb": round(max(r["peak_mb"] - r["idle_mb"] for r in runs), 1),
        "growth_2x": round(full / statistics.median(halves), 2),
    })


benchmark(Bench(
    name="sync.http", baseline_name="one-txn Core insert of the same rows", sizes=(50, 5000), setup=_setup,
    subject=_subject, baseline=_baseline, repeats=2, after=_after,
    doc=f"{TABLETS} tablets push at once over loopback HTTP to a real server process; reports push p50/p95, "
        "server memory over idle (goal <= 150 MB) and growth_2x (time at 2x data / 1x; goal <= 2.2)",
))
