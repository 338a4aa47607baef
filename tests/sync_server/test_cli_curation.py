"""``baulk horizon``, ``baulk date`` and ``baulk correct`` through click's runner: exact output, one-message
errors with exit 1, validation re-run after each change."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from schema.records import Correction, Find, Unit
from sync_server.cli import cli
from tests.helpers import find_data, seeded_server


@pytest.fixture
def db(tmp_path: Path):  # type: ignore[no-untyped-def]
    url = f"sqlite:///{tmp_path / 'server.sqlite'}"
    server, demo = seeded_server(url)
    server.add(Find(**find_data(demo, number=12)))
    server.close()
    return url, demo


def run(url: str, *args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, [*args, "--db", url])
    return result.exit_code, result.output


def test_horizon_commands(db) -> None:  # type: ignore[no-untyped-def]
    url, _demo = db
    code, out = run(url, "horizon", "add", "H5", "--label", "Basal gravels", "--formation", "Vellan Formation",
                    "--bed", "Gravel VL-0")
    assert (code, out) == (0, "horizon H5 (Basal gravels) added at order 5; Vellan Formation, Gravel VL-0\n")
    code, out = run(url, "horizon", "list")
    assert code == 0 and out.splitlines() == [
        "order  code     units  label",
        "    1  H1           4  Upper lake silts: 101, 201, 203, 301",
        "    2  H2           3  Grey tuff marker VL-1: 102, 204, 302",
        "    3  H3           2  Deltaic sands: 103, 205",
        "    4  H4           2  Lower clays: 104, 303",
        "    5  H5           0  Basal gravels [Vellan Formation / Gravel VL-0]",
        "units in no horizon: 202",
    ]
    code, out = run(url, "horizon", "reorder", "H2", "H1", "H3", "H4", "H5")
    assert code == 0 and out.splitlines()[0] == "horizons top to bottom: H2, H1, H3, H4, H5; H2 2->1, H1 1->2"
    # the matrix rule runs again at once: H1's units lie above H2's
    assert out.splitlines()[1].startswith("checks now open: ") and "HORIZON_ORDER" in out
    code, out = run(url, "horizon", "reorder", "H1", "H2", "H3", "H4", "H5")
    assert (code, out) == (0, "horizons top to bottom: H1, H2, H3, H4, H5; H1 2->1, H2 1->2\n")
    code, out = run(url, "horizon", "assign", "H2", "101", "201", "102", "--reason", "same tuff", "--by", "DM")
    assert code == 0 and out.splitlines()[0] == ("units 101, 201 now in horizon H2 (by DM: same tuff); "
                                                 "already there: 102")
    code, out = run(url, "horizon", "assign", "none", "101", "--reason", "reworked", "--by", "JT")
    assert code == 0 and out.splitlines()[0] == "unit 101 now in no horizon (by JT: reworked)"


@pytest.mark.parametrize(("args", "message"), [
    (("horizon", "reorder", "H1", "H2"), "Error: the new order of site VLM's horizons must name each of them once, "
                                         "top first: missing H3, H4. Its horizons are H1, H2, H3, H4"),
    (("horizon", "assign", "H2", "101", "999", "--reason", "x y", "--by", "DM"),
     "Error: site VLM has no unit 999; nothing was assigned. Check the codes against the site's units"),
    (("horizon", "assign", "H2", "101", "--reason", "", "--by", "DM"),
     "Error: a horizon assignment needs a reason: say why these units belong there (or out), e.g. 'same grey tuff "
     "as 102 in the east section'"),
    (("horizon", "add", "H1", "--label", "again"),
     "Error: site VLM already has a horizon H1 ('Upper lake silts', order 1); choose another code"),
    (("date", "add", "999", "--method", "radiocarbon", "--age-ka", "1", "--sigma-ka", "0"),
     "Error: date refused, nothing was saved. unit: site VLM has no unit '999'. Fix: give the code of a unit of "
     "this site; sigma_ka: 0 is not above 0. Fix: give the laboratory's one-sigma uncertainty in ka; it is never 0 "
     "or negative"),
    (("correct", "find", "12", "wieght_g=3", "--reason", "weighed again", "--by", "DM"),
     "Error: a find has no field 'wieght_g' (did you mean weight_g?); the fields a correction may change are: "
     "number, season, trench, unit, spit, category, material, taxon, element, count, weight_g, length_mm, width_mm, "
     "thickness_mm, bearing_deg, plunge_deg, recovery, e, n, z, position_source, position_sigma_m, bucket, "
     "found_at, recorder, notes, human_remains, label_printed_at"),
    (("correct", "unit", "101", "status=open", "--reason", "checked", "--by", "DM"),
     "Error: unit 101: status is already open; nothing was corrected. Leave out what does not change"),
])
def test_errors_are_one_message_and_exit_1(db, args: tuple[str, ...], message: str) -> None:  # type: ignore[no-untyped-def]
    url, _demo = db
    code, out = run(url, *args)
    assert (code, out) == (1, message + "\n")


def test_date_commands(db, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    url, _demo = db
    code, out = run(url, "date", "add", "301", "--method", "tephra_correlation", "--age-ka", "1870",
                    "--sigma-ka", "6", "--lab-code", "TC-9", "--sample", "12", "--note", "glass match")
    assert (code, out) == (0, "date added: unit 301: tephra_correlation 1870 ± 6 ka, lab code TC-9, sample find 12; "
                              "glass match\n")
    csv = tmp_path / "lab.csv"
    csv.write_text("unit,method,age_ka,sigma_ka,lab_code\n101,radiocarbon,12.48,0.21,RC-11\n"
                   "102,argon_argon,1871,4,VLM-AR-07\n")
    code, out = run(url, "date", "import", str(csv))
    assert (code, out) == (0, "imported lab.csv: 1 date added, 1 skipped\n"
                              "  line 3 skipped: date VLM-AR-07 (argon_argon) on unit 102 already recorded\n")
    result = CliRunner().invoke(cli, ["date", "list", "--db", url])
    assert result.exit_code == 0 and result.stderr == "4 dates\n"
    assert result.stdout.splitlines() == [
        "unit 101: radiocarbon 12.48 ± 0.21 ka, lab code RC-11",
        "unit 102: argon_argon 1871 ± 4 ka, lab code VLM-AR-07; sanidine, single-crystal fusion",
        "unit 104: tephra_correlation 1935 ± 12 ka, lab code VLM-TC-02; glass chemistry match to a basin marker ash",
        "unit 301: tephra_correlation 1870 ± 6 ka, lab code TC-9, sample find 12; glass match",
    ]
    csv.write_text("unit,method,age_ka,sigma_ka,lab_code\n101,radiocarbon,12.48,-1,RC-12\n")
    code, out = run(url, "date", "import", str(csv))
    assert (code, out) == (1, f"Error: {csv}: 1 row refused, nothing was imported.\nline 2: column sigma_ka: -1 is "
                              "not above 0; fix: give the laboratory's one-sigma uncertainty in ka; it is never 0 or "
                              "negative\n")


def test_correct_commands(db) -> None:  # type: ignore[no-untyped-def]
    from sync_server.store import ServerStore

    url, demo = db
    code, out = run(url, "correct", "find", "12", "unit=203", "trench=TR2", "notes=rolled edge",
                    "--reason", "bag label says 203", "--by", "DM")
    assert (code, out) == (0, "find 12 corrected by DM: unit 101 -> 203; trench TR1 -> TR2; notes (empty) -> "
                              "rolled edge\nreason: bag label says 203\n")
    code, out = run(url, "correct", "unit", "104", "texture=silty_clay", "--reason", "re-read", "--by", "DM")
    assert (code, out) == (0, "unit 104 corrected by DM: texture clay -> silty_clay\nreason: re-read\n")
    code, out = run(url, "correct", "unit", "104", "texture", "--reason", "re-read", "--by", "DM")
    assert code == 2 and "'texture' is not FIELD=VALUE; write e.g. unit=203 or notes='rolled edge'" in out
    with ServerStore.open(url) as server:
        f = server.list(Find, number=12)[0]
        assert (f.unit_id, f.trench_id) == (demo.units["203"].id, demo.trenches["TR2"].id)
        assert server.get(Unit, demo.units["104"].id).texture == "silty_clay"
        assert sorted(c.fields for c in server.list(Correction)) == ["texture", "unit_id,trench_id,notes"]


def test_a_missing_store_is_refused_not_created(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'nowhere.sqlite'}"
    code, out = run(url, "horizon", "list")
    assert code == 1 and out.startswith("Error: no Baulk store at ")
    assert not (tmp_path / "nowhere.sqlite").exists()
