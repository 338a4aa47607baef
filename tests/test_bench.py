"""The benchmark harness: ratios from the same run, JSON keys scripts rely on."""

from __future__ import annotations

import json
import time

from click.testing import CliRunner

from schema import benchkit
from sync_server.cli import cli


def test_ratio_is_subject_over_baseline(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(benchkit, "BENCHMARKS", {})
    benchkit.benchmark(benchkit.Bench(
        name="test.sleep", baseline_name="sleep 10 ms", sizes=(1, 1), setup=lambda size, work: {},
        subject=lambda s, w, i: time.sleep(0.03), baseline=lambda s, w, i: time.sleep(0.01), repeats=3,
    ))
    (r,) = benchkit.run(["test.sleep"], quick=True)
    assert r.ratio == r.subject_s / r.baseline_s
    assert 2.0 < r.ratio < 4.5
    assert r.peak_rss_mb > 1


def test_bench_json_has_the_scripted_keys() -> None:
    result = CliRunner().invoke(cli, ["bench", "--quick", "--json", "store.save_find"])
    assert result.exit_code == 0, result.output
    (row,) = json.loads(result.output)
    assert {"name", "size", "subject_s", "baseline", "baseline_s", "ratio", "peak_rss_mb"} <= set(row)
    assert row["name"] == "store.save_find" and row["size"] == 150
    assert row["ratio"] == row["subject_s"] / row["baseline_s"]


def test_unknown_benchmark_names_the_known_ones() -> None:
    result = CliRunner().invoke(cli, ["bench", "nope.nothing"])
    assert result.exit_code == 1
    from sync_server.cli import _load_benchmarks

    _load_benchmarks()
    known = ", ".join(sorted(benchkit.BENCHMARKS))
    assert "store.save_find" in known and "survey.reduce" in known and "strata.validate" in known
    assert result.output == f"Error: unknown benchmark nope.nothing; known: {known}\n"
