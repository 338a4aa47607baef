"""The ``baulk`` command line: help everywhere, exact output, domain errors as one message and exit 1."""

from __future__ import annotations

import json
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from sync_server.cli import cli


def _commands(group: click.Group, prefix: str = "") -> list[tuple[str, click.Command]]:
    out = []
    for name, cmd in group.commands.items():
        out.append((prefix + name, cmd))
        if isinstance(cmd, click.Group):
            out.extend(_commands(cmd, prefix + name + " "))
    return out


def test_help_lists_the_commands() -> None:
    result = CliRunner().invoke(cli, ["--help"])
    assert result.exit_code == 0
    for name in ("demo", "serve", "bench", "inspect"):
        assert f"  {name} " in result.output


@pytest.mark.parametrize(("name", "command"), _commands(cli))
def test_every_command_has_help(name: str, command: click.Command) -> None:
    assert command.help and len(command.help.strip()) > 20, f"baulk {name} has no help text"
    for param in command.params:
        if isinstance(param, click.Option):
            assert param.help, f"baulk {name} {param.opts[0]} has no help text"


def test_demo_writes_a_summary(demo_out: Path) -> None:
    out = demo_out
    assert "[demo] camp server: baulk site init " in (out / "cli-output.txt").read_text()
    summary = json.loads((out / "summary.json").read_text())
    assert set(summary["tablets"]) == {"TAB-1", "TAB-2", "TAB-3"}
    assert sum(t["finds"] for t in summary["tablets"].values()) == 370
    assert all(t["integrity"] == "ok" for t in summary["tablets"].values())
    assert all(r["nothing_written"] and "refused" in r["message"] for r in summary["refused"])
    assert (out / "summary.md").read_text().startswith("# Baulk demo: site VLM (invented)")
    # numbers stayed inside each tablet's block, and no number was used twice
    spans = sorted(t["numbers"] for t in summary["tablets"].values())
    assert spans == [[1, 140], [501, 620], [1001, 1110]]
    # survey: the grid was fitted, each tablet set up its instrument, plotted finds kept their raw observations
    survey = summary["survey"]
    assert survey["polynomial_max_error_m"] < 1e-4 and survey["grid_max_residual_m"] < 0.005
    assert survey["setups"]["TAB-2"]["method"] == "resection" and survey["setups"]["TAB-2"]["station_error_m"] < 0.005
    for t in summary["tablets"].values():
        assert t["shots"] == t["by_position"]["total_station"]
        assert t["gnss_fixes"] == t["by_position"].get("gnss", 0)
    assert summary["tablets"]["TAB-3"]["gnss_fixes"] > 0
    # sync: over real HTTP, in two orders, with the overlapping edits surfaced and the replicas converged
    sync = summary["sync"]
    assert sync["converged"] and sync["finds_on_server"] == 381
    assert sync["bundle"]["batches"] >= 1 and sync["bundle"]["versions"] > 50  # the day's sieve finds, field by field
    assert sorted((c["record"], c["field"]) for c in sync["conflicts"]) == [("find", "unit_id"), ("unit", "description")]
    assert sync["open_after"] == 1 and sync["slip_unit_everywhere"] == ["104"]
    assert summary["server_validation"]["by_code"]["UNIT_IS_CUT"] == 1
    # safety: each tablet's day-start heat and laser acknowledgements reached the camp
    assert summary["safety"] == {"checks": 6, "by_kind": {"heat": 3, "laser": 3}}
    assert "the camp holds 6 safety checks (heat 3, laser 3)" in (out / "summary.md").read_text()
    # ... written by the tablet's own acknowledgement path, so they read as the app's do
    from schema.records import SafetyCheck
    from sync_server.store import ServerStore

    server = ServerStore.open(f"sqlite:///{out / 'server.sqlite'}")
    try:
        answers = sorted(c.answer for c in server.list(SafetyCheck))
    finally:
        server.close()
    recorders = sorted(t["recorder"] for t in summary["tablets"].values())
    assert answers == sorted([f"heat caution read at day start; acknowledged by {r}" for r in recorders]
                             + [f"laser class 3R; acknowledged by {r}" for r in recorders])


def test_the_demo_takes_the_public_path_and_ends_with_the_analysts_files(demo_out: Path) -> None:
    """The demo sets up from its own set-up file, horizons and dates as a data manager would, and leaves the
    export and the checks where README's quick start says; the data package validates (frictionless)."""
    from frictionless import Package  # the Frictionless Data reference library

    from schema.setup_file import read_setup

    summary = json.loads((demo_out / "summary.json").read_text())
    plan = read_setup(demo_out / "setup" / "site.toml")  # the file the demo wrote is a valid set-up file
    assert (plan.site.code, plan.site.crs_epsg, [t.code for t in plan.trenches]) == ("VLM", 32736, ["TR1", "TR2", "TR3"])
    assert summary["curation"] == {"setup_file": "setup/site.toml", "horizons": ["H1", "H2", "H3", "H4"],
                                   "units_assigned": 11, "dates_imported": 2, "dates_skipped": 0,
                                   "dates_file": "setup/dates.csv"}
    assert {"H1", "H2", "H3", "H4"} == set(summary["age_brackets"])
    assert sorted(p.name for p in (demo_out / "checks").iterdir()) == ["age_brackets.json", "issues.csv", "issues.json"]
    report = Package(str(demo_out / "export" / "datapackage.json")).validate()
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:5]
    md = (demo_out / "summary.md").read_text()
    assert "ran the code behind `baulk site init`" in md
    assert "`export/`: README.md, age_depth_TR1.png, age_depth_TR2.png, age_depth_TR3.png, ages_by_find.csv" in md


def test_demo_refuses_to_overwrite(demo_out: Path) -> None:
    result = CliRunner().invoke(cli, ["demo", "--out", str(demo_out)])
    assert result.exit_code == 1
    assert result.output == (
        f"Error: {demo_out} already holds a demo; choose a new folder or delete {demo_out / 'server.sqlite'} first\n"
    )


def test_serve_with_half_a_tls_pair_says_what_to_give(tmp_path: Path) -> None:
    cert = tmp_path / "c.pem"
    cert.write_text("x")
    result = CliRunner().invoke(cli, ["serve", "--tls-cert", str(cert), "--db", f"sqlite:///{tmp_path}/s.sqlite"])
    assert result.exit_code == 1
    assert result.output == "Error: give both tls_cert and tls_key for HTTPS, or neither for plain HTTP\n"


def test_inspect_a_tablet_file(demo_out: Path) -> None:
    result = CliRunner().invoke(cli, ["inspect", str(demo_out / "tablets" / "TAB-2.sqlite")])
    assert result.exit_code == 0
    assert "integrity: ok\n" in result.output
    assert "upgrade steps pending: none (up to date)\n" in result.output
    assert "  find           381\n" in result.output  # after sync: 370 planned, 6 slips, 5 bundled sieve finds


def test_inspect_junk_is_one_clear_error(tmp_path: Path) -> None:
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"\x00garbage" * 512)
    result = CliRunner().invoke(cli, ["inspect", str(junk)])
    assert result.exit_code == 1
    assert result.output == (f"Error: {junk} is not a tablet file (it is not a SQLite database); check the path and "
                             "give the tablet's own .sqlite file\n")
