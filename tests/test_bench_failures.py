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
