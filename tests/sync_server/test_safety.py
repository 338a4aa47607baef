"""The safety log on SQLite and PostgreSQL: ``safety_log`` and ``baulk safety`` (the camp page is in test_pages)."""

from __future__ import annotations

import pytest

from tests.helpers import safety_day


def test_safety_log_filters_and_orders(camp) -> None:  # type: ignore[no-untyped-def]
    import datetime as dt

    from sync_server.safety import safety_log, safety_summary

    server, demo, http, tmp = camp
    bone = safety_day(server, demo, http, tmp)
    every = safety_log(server)
    assert [c["kind"] for c in every] == ["human_remains", "shoring", "laser"]  # newest first
    told = every[0]
    assert (told["trench"], told["unit"], told["find_number"], told["find_id"]) == ("TR1", "101", bone.number, bone.id)
    assert every[2]["unit"] is None and every[2]["find_number"] is None  # the laser check concerns the trench alone
    week = dt.datetime.now(dt.timezone.utc) - dt.timedelta(days=7)
    assert [c["kind"] for c in safety_log(server, since=week)] == ["human_remains", "shoring"]
    assert [c["kind"] for c in safety_log(server, trench="TR1", kind="laser")] == ["laser"]
    assert safety_log(server, trench="TR2") == []
    today = safety_summary(server, since=dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=24))
    assert today["counts"] == {"shoring": 1, "human_remains": 1, "laser": 0, "heat": 0}
    assert [c["notified"] for c in today["human_remains"]] == ["site director RM at 10:40"]


def test_safety_log_names_an_unknown_kind(camp) -> None:  # type: ignore[no-untyped-def]
    from sync_server.safety import safety_log

    server, _demo, _http, _tmp = camp
    with pytest.raises(ValueError) as exc:
        safety_log(server, kind="ladder")
    assert str(exc.value) == "no safety check kind is called 'ladder'; choose one of shoring, human_remains, laser, heat"


def test_baulk_safety_lists_and_writes_csv(camp) -> None:  # type: ignore[no-untyped-def]
    import pandas as pd
    from click.testing import CliRunner

    from sync_server.cli import cli

    server, demo, http, tmp = camp
    bone = safety_day(server, demo, http, tmp)
    db = server.engine.url.render_as_string(hide_password=False)
    out = tmp / "safety.csv"
    result = CliRunner().invoke(cli, ["safety", "--days", "7", "--csv", str(out), "--db", db])
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert len(lines) == 2 and result.stderr == f"2 safety checks; written to {out}\n"
    assert lines[0].endswith(f"TR1 unit 101 find {bone.number}  possible human remains  [AK] work stopped at the spot; "
                             "the spot secured | told: site director RM at 10:40")
    assert "TR1 unit 101  shoring check at 1.35 m  [AK] east face benched; checked by JT" in lines[1]
    table = pd.read_csv(out)  # read back by pandas' CSV reader
    assert list(table["kind"]) == ["human_remains", "shoring"] and list(table["find_number"].isna()) == [False, True]
    assert table.loc[1, "depth_m"] == 1.35 and table["checked_at"].str.endswith("+00:00").all()
    wrong = CliRunner().invoke(cli, ["safety", "--kind", "ladder", "--db", db])
    assert wrong.exit_code == 2 and "'ladder' is not one of 'shoring', 'human_remains', 'laser', 'heat'" in wrong.output
