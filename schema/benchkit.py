"""The benchmark harness behind ``baulk bench``.

A benchmark measures its subject and a baseline doing the same work in the same run (e.g. the tablet store's
find save against a bare SQLite insert of the same rows), repeats both, and reports the ratio of the medians
(subject / baseline: lower is better) with the size and the peak resident memory. Each benchmark runs in a
forked child process, so the peak memory is its own. Parts register their benchmarks with ``@benchmark``.
"""

from __future__ import annotations

import dataclasses
import json
import multiprocessing as mp
import resource
import statistics
import sys
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable

__all__ = ["BENCHMARKS", "Bench", "Result", "benchmark", "format_line", "run"]


@dataclass
class Result:
    name: str
    size: int
    subject_s: float
    baseline: str
    baseline_s: float
    ratio: float
    peak_rss_mb: float
    repeats: int
    extra: dict[str, Any]


@dataclass
class Bench:
    """One measurement: ``setup(size, workdir)`` returns state; ``subject`` and ``baseline`` time one run each.

    ``subject(state, workdir, i)`` and ``baseline(state, workdir, i)`` must do the same work; ``i`` is the repeat.
    Either may return a float: the seconds of the part that counts, timed by itself (set-up left out).
    """

    name: str
    baseline_name: str
    sizes: tuple[int, int]  # (quick, full)
    setup: Callable[[int, Path], Any]
    subject: Callable[[Any, Path, int], Any]
    baseline: Callable[[Any, Path, int], Any]
    repeats: int = 3
    doc: str = ""
    after: Callable[[Any, Path], None] | None = None  # after the timed runs: may add to state["report"]


BENCHMARKS: dict[str, Bench] = {}


def benchmark(bench: Bench) -> Bench:
    """Register a benchmark under its ``area.what`` name."""
    if bench.name in BENCHMARKS:
        raise ValueError(f"benchmark {bench.name!r} is registered twice")
    BENCHMARKS[bench.name] = bench
    return bench


def _timed(fn: Callable[..., Any], *args: Any) -> float:
    """Seconds one run took; a run that returns a float has timed its own core (e.g. without starting a server)."""
    t0 = time.perf_counter()
    own = fn(*args)
    elapsed = time.perf_counter() - t0
    return own if isinstance(own, float) else elapsed


def _measure(bench: Bench, size: int, queue: Any) -> None:
    try:
        with tempfile.TemporaryDirectory(prefix=f"baulk-bench-{bench.name}-") as tmp:
            work = Path(tmp)
            state = bench.setup(size, work)
            subj, base = [], []
            for i in range(bench.repeats):  # interleaved so drift hits both alike
                base.append(_timed(bench.baseline, state, work, i))
                subj.append(_timed(bench.subject, state, work, i))
            if bench.after is not None:
                bench.after(state, work)
            peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
            s, b = statistics.median(subj), statistics.median(base)
            extra = state.get("report", {}) if isinstance(state, dict) else {}
            queue.put(Result(bench.name, size, s, bench.baseline_name, b, s / b if b else float("inf"),
                             round(peak_kb / 1024, 1), bench.repeats, extra))
    except BaseException as exc:  # reported in the parent with the benchmark's name
        queue.put(exc)


def run(names: list[str] | None = None, *, quick: bool = False, repeats: int | None = None) -> list[Result]:
    """Run the named benchmarks (all when empty), each in its own forked process; ``repeats`` times each arm
    that many times instead of the benchmark's own count."""
    unknown = [n for n in names or [] if n not in BENCHMARKS]
    if unknown:
        raise KeyError(f"unknown benchmark {', '.join(unknown)}; known: {', '.join(sorted(BENCHMARKS))}")
    ctx = mp.get_context("fork")
    results = []
    for name in names or sorted(BENCHMARKS):
        bench = BENCHMARKS[name]
        if repeats is not None:
            bench = dataclasses.replace(bench, repeats=repeats)
        size = bench.sizes[0] if quick else bench.sizes[1]
        queue = ctx.Queue()
        proc = ctx.Process(target=_measure, args=(bench, size, queue))
        proc.start()
        got = queue.get()
        proc.join()
        if isinstance(got, BaseException):
            raise RuntimeError(f"benchmark {name} failed: {got!r}") from got
        results.append(got)
    return results


def format_line(r: Result) -> str:
    return (
        f"{r.name:<24} size={r.size:<7} subject={r.subject_s * 1000:9.1f} ms  "
        f"baseline({r.baseline})={r.baseline_s * 1000:9.1f} ms  peak_rss={r.peak_rss_mb:7.1f} MB  ratio={r.ratio:.2f}"
        + "".join(f"  {k}={v}" for k, v in r.extra.items() if isinstance(v, (int, float)) and k not in ("versions", "finds"))
    )


def to_json(results: list[Result]) -> str:
    return json.dumps([asdict(r) for r in results], indent=2)


if __name__ == "__main__":  # pragma: no cover
    print("run benchmarks with: baulk bench", file=sys.stderr)
