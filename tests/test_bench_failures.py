"""One failing benchmark never hides the others' results (issue 16: `baulk bench` stopped at sync.http)."""

from __future__ import annotations

import time

from click.testing import CliRunner

from schema import benchkit
from sync_server.cli import cli


def _boom(_state: object, _work: object, _i: int) -> None:
    raise RuntimeError("the server holds 9 find versions; the tablets sent 10")


def test_a_failing_benchmark_is_reported_and_the_next_still_runs(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(benchkit, "BENCHMARKS", {})
    for name, subject in (("test.fails", _boom), ("test.works", lambda s, w, i: time.sleep(0.002))):
        benchkit.benchmark(benchkit.Bench(name=name, baseline_name="sleep 1 ms", sizes=(1, 1),
                                          setup=lambda size, work: {}, subject=subject,
                                          baseline=lambda s, w, i: time.sleep(0.001), repeats=1))
    monkeypatch.setattr("sync_server.cli._load_benchmarks", lambda: None)
    result = CliRunner().invoke(cli, ["bench", "--quick", "test.fails", "test.works"])
    assert result.exit_code == 1
    lines = result.output.splitlines()
    assert lines[0].startswith("running test.fails ...")
    assert lines[1].startswith("test.fails               FAILED: benchmark test.fails failed: RuntimeError(")
    assert "the tablets sent 10" in lines[1]
    assert lines[3].startswith("test.works               size=1") and "ratio=" in lines[3]
    assert lines[-1] == "Error: 1 of 2 benchmarks failed: test.fails (their lines above say why)"


def test_repeats_sets_how_many_times_each_arm_is_timed(monkeypatch, tmp_path) -> None:  # type: ignore[no-untyped-def]
    """`baulk bench --repeats 1` times a long benchmark once at its size (sync.http at full size takes an hour)."""
    monkeypatch.setattr(benchkit, "BENCHMARKS", {})
    log = tmp_path / "arms.txt"  # the arms run in a forked process: each writes a line here

    def arm(name: str) -> None:
        with open(log, "a") as f:
            f.write(name + "\n")

    benchkit.benchmark(benchkit.Bench(name="test.counted", baseline_name="a line written", sizes=(1, 2),
                                      setup=lambda size, work: {}, subject=lambda s, w, i: arm("subject"),
                                      baseline=lambda s, w, i: arm("baseline"), repeats=5))
    monkeypatch.setattr("sync_server.cli._load_benchmarks", lambda: None)
    import json

    result = CliRunner().invoke(cli, ["bench", "--json", "--repeats", "2", "test.counted"])
    assert result.exit_code == 0, result.output
    (row,) = json.loads(result.output)
    assert (row["repeats"], row["size"]) == (2, 2)  # the full size, each arm timed twice rather than five times
    assert log.read_text().split() == ["baseline", "subject"] * 2
    refused = CliRunner().invoke(cli, ["bench", "--repeats", "0", "test.counted"])
    assert refused.exit_code == 2 and "--repeats" in refused.output
