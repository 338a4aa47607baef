"""The data manager's curation library (sync_server.curation): horizons, laboratory dates, corrections. Exact
messages, nothing written on a refusal, history kept, and every change pulled by a tablet."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from schema import vocab
from schema.errors import (
    DuplicateRecord, HorizonOrderInvalid, InputFileInvalid, NothingChanged, ReasonMissing, RecordInvalid,
    RecordNotFound, UnknownField, WrongSite,
)
from schema.records import AgeDetermination, Correction, Find, Horizon, HorizonAssignment, Site, Trench, Unit
from sync_server import curation
from sync_server.validation import run_validation
from tests.helpers import find_data, seeded_server, synced_tablet

AT = dt.datetime(2026, 7, 20, 18, 0, tzinfo=dt.timezone.utc)


@pytest.fixture
def site(server_url: str):  # type: ignore[no-untyped-def]
    """The invented site's set-up in a server store (SQLite, then PostgreSQL under the ``pg`` marker)."""
    server, demo = seeded_server(server_url)
    yield server, demo
    server.close()


def _orders(server: Any) -> list[tuple[str, int]]:
    return [(h["code"], h["order"]) for h in curation.list_horizons(server)]


def _written(server: Any) -> dict[str, int]:
    """Rows per record table and the number of field versions: what a refusal must leave unchanged."""
    import sqlalchemy as sa

    from schema.sync.tables import field_version

    with server.read() as conn:
        versions = conn.execute(sa.select(sa.func.count()).select_from(field_version)).scalar_one()
    return {**server.counts(), "versions": versions}


# -- horizons -------------------------------------------------------------------------------------------------
def test_list_horizons_counts_units_top_to_bottom(site) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    rows = curation.list_horizons(server)
    assert [(r["order"], r["code"], r["unit_count"]) for r in rows] == [(1, "H1", 4), (2, "H2", 3), (3, "H3", 2),
                                                                       (4, "H4", 2)]
    assert [u["code"] for u in rows[0]["units"]] == ["101", "201", "203", "301"]
    assert [u["code"] for u in curation.units_without_horizon(server)] == ["202"]  # the channel cut


def test_add_horizon_at_the_bottom_or_in_between(site) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    h = curation.add_horizon(server, code="H5", label="Basal gravels", formation="Vellan Formation",
                             member="Lower Member", bed="  ")
    assert (h.order, h.formation, h.member, h.bed) == (5, "Vellan Formation", "Lower Member", None)
    curation.add_horizon(server, code="H2a", label="Reworked tuff", order=3)
    assert _orders(server) == [("H1", 1), ("H2", 2), ("H2a", 3), ("H3", 4), ("H4", 5), ("H5", 6)]


def test_add_horizon_refusals_write_nothing(site) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    before = _written(server)
    with pytest.raises(DuplicateRecord) as exc:
        curation.add_horizon(server, code="H2", label="Another tuff")
    assert str(exc.value) == ("site VLM already has a horizon H2 ('Grey tuff marker VL-1', order 2); "
                              "choose another code")
    with pytest.raises(HorizonOrderInvalid) as exc:
        curation.add_horizon(server, code="H9", label="Deep", order=7)
    assert str(exc.value) == ("order 7 for horizon H9 would leave a gap: site VLM has 4 horizons; give an order "
                              "from 1 to 5, or none to add it at the bottom")
    with pytest.raises(RecordInvalid) as exc:
        curation.add_horizon(server, code="H 9", label="")
    assert exc.value.fields == ["code", "label"]
    assert _written(server) == before


def test_reorder_rewrites_only_what_moved_and_the_matrix_check_follows(site) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    assert not [i for i in run_validation(server)[0].issues if i.code == "HORIZON_ORDER"]
    moved = curation.reorder_horizons(server, ["H2", "H1", "H3", "H4"])
    assert moved == [("H2", 2, 1), ("H1", 1, 2)]
    assert _orders(server) == [("H2", 1), ("H1", 2), ("H3", 3), ("H4", 4)]
    # outside check: the existing matrix rule sees that H1 units (101 above 102) now lie above a lower horizon
    report, _ = run_validation(server)
    flagged = {i.label for i in report.issues if i.code == "HORIZON_ORDER"}
    assert flagged and all(i.severity == "error" for i in report.issues if i.code == "HORIZON_ORDER")
    curation.reorder_horizons(server, ["H1", "H2", "H3", "H4"])
    assert not [i for i in run_validation(server)[0].issues if i.code == "HORIZON_ORDER"]


@pytest.mark.parametrize(("codes", "message"), [
    (["H1", "H2", "H3"], "missing H4"),
    (["H1", "H2", "H3", "H4", "H1"], "repeated H1"),
    (["H1", "H2", "H3", "H4", "H9"], "unknown H9"),
    (["H2", "H2", "H3", "H9"], "missing H1, H4; repeated H2; unknown H9"),
])
def test_reorder_refuses_a_list_that_misses_or_repeats(site, codes: list[str], message: str) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    before = _written(server)
    with pytest.raises(HorizonOrderInvalid) as exc:
        curation.reorder_horizons(server, codes)
    assert str(exc.value) == (f"the new order of site VLM's horizons must name each of them once, top first: "
                              f"{message}. Its horizons are H1, H2, H3, H4")
    assert _written(server) == before


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(order=st.permutations(["H1", "H2", "H3", "H4"]))
def test_any_permutation_is_the_new_order(site, order: list[str]) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    before = dict(_orders(server))
    moved = curation.reorder_horizons(server, order)
    assert _orders(server) == [(c, i) for i, c in enumerate(order, start=1)]
    assert {c for c, _a, _b in moved} == {c for i, c in enumerate(order, start=1) if before[c] != i}


def test_assign_units_in_bulk_keeps_the_history(site) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    a = curation.assign_units(server, horizon="H2", units=["101", "201", "102"], reason="same tuff as 102 in section",
                              by="DM", at=AT)
    assert (a.horizon, a.moved, a.already) == ("H2", ["101", "201"], ["102"])
    h2 = demo.horizons["H2"].id
    assert server.get(Unit, demo.units["101"].id).horizon_id == h2
    curation.assign_units(server, horizon=None, units=["101"], reason="tuff is reworked here", by="JT",
                          at=AT + dt.timedelta(hours=1))
    assert server.get(Unit, demo.units["101"].id).horizon_id is None
    history = server.horizon_history(demo.units["101"].id)
    assert [(h.horizon_id, h.assigned_by, h.note) for h in history] == [
        (h2, "DM", "same tuff as 102 in section"), (None, "JT", "tuff is reworked here")]
    rows = curation.assignment_history(server, unit="101")
    assert [(r["horizon"], r["by"], r["reason"]) for r in rows] == [(None, "JT", "tuff is reworked here"),
                                                                    ("H2", "DM", "same tuff as 102 in section")]


def test_assign_units_refusals_write_nothing(site) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    other = Site(code="OTH", name="Other site", crs_epsg=32736)
    server.add(other)
    trench = server.add(Trench(site_id=other.id, code="T9", outline=[(0.0, 0.0), (2.0, 0.0), (2.0, 2.0)]))
    server.add(Unit(site_id=other.id, trench_id=trench.id, code="901", kind="deposit", opened_on=dt.date(2026, 7, 1),
                    recorder="AK"))
    before = _written(server)
    cases: list[tuple[dict[str, Any], type[Exception], str]] = [
        (dict(units=["101"], reason="  "), ReasonMissing,
         "a horizon assignment needs a reason: say why these units belong there (or out), e.g. 'same grey tuff as "
         "102 in the east section'"),
        (dict(units=["101", "999", "998"]), RecordNotFound,
         "site VLM has no units 999, 998; nothing was assigned. Check the codes against the site's units"),
        (dict(units=["101", "901"]), WrongSite,
         "unit 901 (site OTH) not of site VLM, the site of horizon H2; a unit can only be put in a horizon of its "
         "own site"),
        (dict(units=["102", "204"]), NothingChanged, "units 102, 204 already in horizon H2; nothing to assign"),
        (dict(units=["101"], horizon="H7"), RecordNotFound,
         "site VLM has no horizon 'H7'; its horizons are: H1, H2, H3, H4"),
        (dict(units=["101"], by="dm"), RecordInvalid,
         "horizon_assignment refused, nothing was saved. assigned_by: string should match pattern '^[A-Z]{2,4}$' "
         "(got 'dm'). Fix: give recorder's initials, 2-4 capital letters, e.g. 'AK'"),
    ]
    for given_, error, message in cases:
        kwargs = {"horizon": "H2", "reason": "same tuff", "by": "DM", "site": "VLM", **given_}
        with pytest.raises(error) as exc:
            curation.assign_units(server, **kwargs)
        assert str(exc.value) == message
    # a bad entry half way (initials) rolls back the units already moved in the same call
    with pytest.raises(RecordInvalid):
        curation.assign_units(server, horizon="H3", units=["101", "201"], reason="r", by="D", site="VLM")
    assert _written(server) == before
    assert server.get(Unit, demo.units["101"].id).horizon_id == demo.horizons["H1"].id
    # with two sites, the default is the first by code (OTH), which has no horizon H2
    with pytest.raises(RecordNotFound) as exc:
        curation.assign_units(server, horizon="H2", units=["901"], reason="same tuff", by="DM")
    assert str(exc.value) == "site OTH has no horizon 'H2'; its horizons are: none yet"


# -- dates ----------------------------------------------------------------------------------------------------
def _csv(tmp: Path, text: str, name: str = "dates.csv") -> Path:
    path = tmp / name
    path.write_text(text, encoding="utf-8")
    return path


GOOD = """unit,method,age_ka,sigma_ka,lab_code,sample_find_number,note
101,radiocarbon,12.48,0.21,VLM-RC-11,,charcoal from the hearth lens
103,luminescence,1905.5,35,VLM-OSL-3,7,"quartz, single grain"
204,argon_argon,1871,4,VLM-AR-07b,,
"""


def test_import_dates_csv_agrees_with_pandas_and_twice_adds_nothing(site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    import pandas as pd

    server, demo = site
    sample = server.add(Find(**find_data(demo, number=7, unit_id=demo.units["103"].id, category="sample",
                                         material="sediment", z=99.2)))
    path = _csv(tmp_path, GOOD)
    r = curation.import_dates_csv(server, path)
    assert (len(r.added), r.skipped) == (3, [])
    assert next(a for a in r.added if a.lab_code == "VLM-OSL-3").find_id == sample.id
    # outside check: pandas.read_csv, reference reader, reads the same file as the import did
    ref = pd.read_csv(path, dtype={"unit": str, "lab_code": str}, keep_default_na=False)
    held = {d["lab_code"]: d for d in curation.list_dates(server)}
    for row in ref.itertuples():
        d = held[row.lab_code]
        assert (d["unit"], d["method"], d["age_ka"], d["sigma_ka"], d["note"]) == (
            row.unit, row.method, float(row.age_ka), float(row.sigma_ka), row.note)
        assert d["sample_find_number"] == (int(row.sample_find_number) if row.sample_find_number != "" else None)
    before = _written(server)
    again = curation.import_dates_csv(server, path)
    assert again.added == [] and [s["line"] for s in again.skipped] == [2, 3, 4]
    assert again.skipped[0] == {"line": 2, "what": "date VLM-RC-11 (radiocarbon) on unit 101",
                                "why": "already recorded"}
    assert _written(server) == before


def test_a_bad_dates_csv_names_every_line_and_writes_nothing(site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    path = _csv(tmp_path, """unit,method,age_ka,sigma_ka,lab_code,sample_find_number
101,radiocarbon,12.48,0.21,VLM-RC-11,
999,radiocarbon,13,0.3,VLM-RC-12,
101,c14,13,0,VLM-RC-13,
102,argon_argon,1871,4,VLM-AR-07,
103,luminescence,1900,30,VLM-OSL-4,4242
101,radiocarbon,12.48,0.21,VLM-RC-11,
""")
    before = _written(server)
    with pytest.raises(InputFileInvalid) as exc:
        curation.import_dates_csv(server, path)
    assert str(exc.value) == "\n".join([
        f"{path}: 3 rows refused, nothing was imported.",
        "line 3: column unit: site VLM has no unit '999'; fix: give the code of a unit of this site",
        "line 4: column method: 'c14' is not a dating method; fix: use one of: radiocarbon, argon_argon, "
        "luminescence, tephra_correlation, uranium_series, other; column sigma_ka: 0 is not above 0; fix: give the "
        "laboratory's one-sigma uncertainty in ka; it is never 0 or negative",
        # line 5 is the demo's date again (skipped), line 7 repeats line 2 (skipped): neither is an error
        "line 6: column sample_find_number: site VLM has no find numbered 4242; fix: give the number of the dated "
        "sample's find (on its bag label), or leave it empty",
    ])
    assert _written(server) == before


def test_a_date_held_with_other_values_is_refused_not_replaced(site, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    path = _csv(tmp_path, "unit,method,age_ka,sigma_ka,lab_code\n102,argon_argon,1875,4,VLM-AR-07\n"
                          "101,radiocarbon,12.5,0.2,X-1\n101,radiocarbon,12.6,0.2,X-1\n")
    with pytest.raises(InputFileInvalid) as exc:
        curation.import_dates_csv(server, path)
    assert str(exc.value) == "\n".join([
        f"{path}: 2 rows refused, nothing was imported.",
        "line 2: date VLM-AR-07 (argon_argon) on unit 102 is already recorded as 1871 ± 4 ka but this row gives "
        "1875 ± 4 ka; a recorded date is corrected, not given again: make this row match it, or give a new "
        "determination its own lab code",
        "line 4: date X-1 (radiocarbon) on unit 101 is given on line 3 as 12.5 ± 0.2 ka but this row gives "
        "12.6 ± 0.2 ka; a recorded date is corrected, not given again: make this row match it, or give a new "
        "determination its own lab code",
    ])
    assert server.count(AgeDetermination) == 2


@pytest.mark.parametrize(("text", "message"), [
    ("unit,method,age_ka,sigma_ka\n101,radiocarbon,1,1\n",
     "missing column lab_code; the header must name unit, method, age_ka, sigma_ka, lab_code (found: unit, method, "
     "age_ka, sigma_ka)"),
    ("unit,method,age_ka,sigma_ka,lab_code,sample\n101,radiocarbon,1,1,A,\n",
     "unknown column sample; the columns are unit, method, age_ka, sigma_ka, lab_code, sample_find_number, note"),
    ("unit,method,age_ka,sigma_ka,lab_code\n101,radiocarbon,1.2.3,1,A\n",
     "line 2: age_ka '1.2.3' is not a number; use a decimal point, e.g. 12.345"),
])
def test_dates_csv_file_errors_name_the_file(site, tmp_path: Path, text: str, message: str) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    path = _csv(tmp_path, text)
    with pytest.raises(InputFileInvalid) as exc:
        curation.import_dates_csv(server, path, name="lab.csv")
    assert str(exc.value) == f"lab.csv{'' if message.startswith('line') else ':'} {message}"


def test_add_date_one_at_a_time(site) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    d = curation.add_date(server, unit="301", method="tephra_correlation", age_ka=1870, sigma_ka=6, lab_code="TC-9",
                          note="glass match")
    assert (d.unit_id, d.site_id, d.find_id) == (demo.units["301"].id, demo.site.id, None)
    with pytest.raises(DuplicateRecord) as exc:
        curation.add_date(server, unit="301", method="tephra_correlation", age_ka=1870, sigma_ka=6, lab_code="TC-9")
    assert str(exc.value) == ("date TC-9 (tephra_correlation) on unit 301 is already recorded with these values; "
                              "nothing was added")
    with pytest.raises(RecordInvalid) as exc:
        curation.add_date(server, unit="30l", method="radiocarbon", age_ka=-1, sigma_ka=-0.5, sample_find_number="x1")
    assert str(exc.value) == (
        "date refused, nothing was saved. unit: site VLM has no unit '30l' (did you mean 303 or 302 or 301?). Fix: give "
        "the code "
        "of a unit of this site; sigma_ka: -0.5 is not above 0. Fix: give the laboratory's one-sigma uncertainty in "
        "ka; it is never 0 or negative; sample_find_number: 'x1' is not a find number. Fix: give the whole number "
        "on the sample's bag label, or leave it empty")
    with pytest.raises(RecordInvalid) as exc:
        curation.add_date(server, unit="301", method="radiocarbon", age_ka=-1, sigma_ka=0.5)
    assert exc.value.fields == ["age_ka"]
    assert server.count(AgeDetermination) == 3
    assert [(r["unit"], r["lab_code"]) for r in curation.list_dates(server)] == [
        ("102", "VLM-AR-07"), ("104", "VLM-TC-02"), ("301", "TC-9")]


# -- corrections ----------------------------------------------------------------------------------------------
@pytest.fixture
def find(site):  # type: ignore[no-untyped-def]
    server, demo = site
    return server.add(Find(**find_data(demo, number=12)))


def test_correct_a_find_moves_it_by_unit_code_with_its_reason(site, find) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    done = curation.correct_record(server, record="find", key="12", changes={"unit": "102", "weight_g": "3,5"},
                                   reason="section drawing shows it in the tuff", by="DM", at=AT)
    assert done.changes == [("unit", "101", "102"), ("weight_g", "(empty)", "3.5")]
    now = server.get(Find, find.id)
    assert (now.unit_id, now.weight_g, now.number) == (demo.units["102"].id, 3.5, 12)
    (c,) = server.list(Correction, record_id=find.id)
    assert (c.record, c.fields, c.reason, c.by, c.at) == ("find", "unit_id,weight_g",
                                                         "section drawing shows it in the tuff", "DM", AT)
    curation.correct_record(server, record="find", key="12", changes={"unit_id": "101", "found_at":
                            "2026-07-04T10:00:00+03:00"}, reason="misread label", by="AK", at=AT + dt.timedelta(1))
    rows = curation.corrections(server, record="find", record_id=find.id)
    assert [(r["by"], r["fields"]) for r in rows] == [("AK", ["unit", "found_at"]), ("DM", ["unit", "weight_g"])]
    assert server.get(Find, find.id).found_at == dt.datetime(2026, 7, 4, 7, 0, tzinfo=dt.timezone.utc)


def test_correct_a_unit(site) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    done = curation.correct_record(server, record="unit", key="103", changes={
        "munsell": "10yr 6/3", "status": "closed", "closed_on": "2026-07-18", "description": ""},
        reason="re-read in daylight; closed at the end of the week", by="DM")
    u = server.get(Unit, demo.units["103"].id)
    assert (u.munsell, u.status, u.closed_on, u.description) == ("10YR 6/3", "closed", dt.date(2026, 7, 18), "")
    assert [f for f, _was, _now in done.changes] == ["munsell", "status", "closed_on", "description"]
    assert done.label == "unit 103"


@pytest.mark.parametrize(("record", "key", "changes", "error", "message"), [
    ("find", "12", {"wieght_g": "3"}, UnknownField,
     "a find has no field 'wieght_g' (did you mean weight_g?); the fields a correction may change are: number, "
     "season, trench, unit, spit, category, material, taxon, element, count, weight_g, length_mm, width_mm, "
     "thickness_mm, bearing_deg, plunge_deg, recovery, e, n, z, position_source, position_sigma_m, bucket, "
     "found_at, recorder, notes, human_remains, label_printed_at"),
    ("find", "12", {"voided": "yes"}, UnknownField,
     "find field voided is not corrected here: voiding is not a correction: void the find on a tablet (it keeps "
     "its number and the reason)"),
    ("unit", "101", {"horizon_id": "H2"}, UnknownField,
     "unit field horizon_id is not corrected here: put the unit in a horizon with the horizon assignment (baulk "
     "horizon assign, or the Horizons page), which keeps its history"),
    ("find", "12", {"material": "obsidian", "count": "1"}, NothingChanged,
     "find 12: material is already obsidian, count is already 1; nothing was corrected. Leave out what does not "
     "change"),
    ("find", "12", {"unit": "999", "weight_g": "-2"}, RecordInvalid,
     "find 12 refused, nothing was saved. unit: site VLM has no unit '999'. Fix: give the code of a unit of site "
     "VLM, e.g. 101"),
    ("find", "12", {"weight_g": "-2"}, RecordInvalid,
     "find 12 refused, nothing was saved. weight_g: input should be greater than 0 (got -2.0). Fix: give weight (g)"),
    ("find", "12", {"material": "tooth"}, RecordInvalid,
     "find 12 refused, nothing was saved. material: material 'tooth' is not in the vocabulary for category "
     f"'artifact'. Fix: use one of: {', '.join(vocab.materials_for('artifact'))}"),
    ("find", "12", {"found_at": "yesterday"}, RecordInvalid,
     "find 12 refused, nothing was saved. found_at: 'yesterday' is not a date and time. Fix: type it as "
     "2026-07-14T09:31:00+03:00 (with its time zone)"),
    ("find", "12", {"human_remains": "maybe", "season": "2025"}, RecordInvalid,
     "find 12 refused, nothing was saved. human_remains: 'maybe' is not yes or no. Fix: type yes or no; season: site "
     "VLM has no season '2025' (did you mean 2026?). Fix: give the label of a season of site VLM, e.g. 2026"),
    ("find", "12", {"unit": " "}, RecordInvalid,
     "find 12 refused, nothing was saved. unit: is empty. Fix: give the code of a unit of site VLM, e.g. 101"),
    ("find", "13", {"notes": "x"}, RecordNotFound, "site VLM has no find 13; check the number"),
    ("find", "twelve", {"notes": "x"}, RecordNotFound,
     "'twelve' is not a find number; give the number on the find's bag label, e.g. 1012"),
    ("unit", "101", {"code": "102"}, DuplicateRecord, "site VLM already has a unit 102; choose another code"),
    ("find", "12", {}, UnknownField, "no field was given to correct on find 12; give FIELD=VALUE, e.g. notes=rolled edge"),
])
def test_correction_refusals_write_nothing(site, find, record: str, key: str, changes: dict[str, str],  # type: ignore[no-untyped-def]
                                           error: type[Exception], message: str) -> None:
    server, _demo = site
    before = _written(server)
    with pytest.raises(error) as exc:
        curation.correct_record(server, record=record, key=key, changes=changes, reason="checked the bag", by="DM")
    assert str(exc.value) == message
    assert _written(server) == before


def test_a_correction_needs_a_reason(site, find) -> None:  # type: ignore[no-untyped-def]
    server, _demo = site
    with pytest.raises(ReasonMissing) as exc:
        curation.correct_record(server, record="find", key="12", changes={"notes": "rolled"}, reason=" ", by="DM")
    assert str(exc.value) == ("a correction of find 12 needs a reason: say why the record was wrong, e.g. 'section "
                              "drawing shows the piece in 104'")
    with pytest.raises(RecordInvalid) as exc:
        curation.correct_record(server, record="find", key="12", changes={"notes": "rolled"}, reason="ok", by="DM")
    assert exc.value.fields == ["reason"]
    assert server.count(Correction) == 0 and server.get(Find, find.id).notes == ""


def test_a_find_number_already_held_is_refused(site, find) -> None:  # type: ignore[no-untyped-def]
    server, demo = site
    server.add(Find(**find_data(demo, number=13)))
    with pytest.raises(DuplicateRecord) as exc:
        curation.correct_record(server, record="find", key="12", changes={"number": "13"}, reason="typo", by="DM")
    assert str(exc.value) == "find number 13 is already held by another find on site VLM; give a number no find holds"


# -- a tablet pulls it all ------------------------------------------------------------------------------------
def test_a_tablet_pull_brings_assignments_corrections_horizons_and_dates(camp) -> None:  # type: ignore[no-untyped-def]
    server, demo, http, tmp = camp
    t1, c1 = synced_tablet(server, http, tmp, "TAB-1")
    flake = t1.save_find(find=find_data(demo, number=t1.next_find_number()))
    c1.sync()
    curation.add_horizon(server, code="H5", label="Basal gravels", formation="Vellan Formation")
    curation.reorder_horizons(server, ["H1", "H2", "H3", "H5", "H4"])
    curation.assign_units(server, horizon="H2", units=["101"], reason="same tuff as 102", by="DM", at=AT)
    curation.add_date(server, unit="101", method="radiocarbon", age_ka=12.5, sigma_ka=0.2, lab_code="RC-1",
                      sample_find_number=flake.number)
    curation.correct_record(server, record="find", key=str(flake.number), changes={"unit": "103", "notes": "rolled"},
                            reason="section drawing", by="DM", at=AT)
    c1.sync()
    assert t1.get(Unit, demo.units["101"].id).horizon_id == demo.horizons["H2"].id
    (entry,) = t1.list(HorizonAssignment, unit_id=demo.units["101"].id)
    assert (entry.assigned_by, entry.note) == ("DM", "same tuff as 102")
    assert {h.code: h.order for h in t1.list(Horizon)} == {"H1": 1, "H2": 2, "H3": 3, "H5": 4, "H4": 5}
    assert t1.list(Horizon, code="H5")[0].formation == "Vellan Formation"
    (date,) = t1.list(AgeDetermination, lab_code="RC-1")
    assert date.find_id == flake.id
    moved = t1.get(Find, flake.id)
    assert (moved.unit_id, moved.notes) == (demo.units["103"].id, "rolled")
    (c,) = t1.list(Correction, record_id=flake.id)
    assert (c.fields, c.reason, c.by) == ("unit_id,notes", "section drawing", "DM")
