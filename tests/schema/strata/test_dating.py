"""Age brackets from superposition (a unit is younger than what lies beneath it: the law of superposition,
common practice, no source), carried with two-sigma uncertainties."""

from __future__ import annotations

import pytest

from schema.records import AgeDetermination
from schema.strata.dating import age_brackets, age_issues, horizon_brackets
from schema.strata.matrix import build_matrix
from tests.schema.strata.test_matrix import SITE, rel, units


def date(u, code: str, age: float, sigma: float) -> AgeDetermination:  # type: ignore[no-untyped-def]
    return AgeDetermination(site_id=SITE, unit_id=u[code].id, method="argon_argon", age_ka=age, sigma_ka=sigma,
                            lab_code=f"LAB-{code}")


def test_undated_unit_between_two_dates() -> None:
    u = units("1", "2", "3")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2"), rel(u, "2", "above", "3")])
    ages = [date(u, "1", 100.0, 5.0), date(u, "3", 200.0, 10.0)]
    b = age_brackets(m, ages)
    # unit 2: younger than 3 (at most 200 + 2*10) and older than 1 (at least 100 - 2*5)
    assert (b[u["2"].id].youngest, b[u["2"].id].oldest, b[u["2"].id].dated) == (90.0, 220.0, False)
    assert (b[u["1"].id].youngest, b[u["1"].id].oldest) == (90.0, 110.0)
    assert b[u["3"].id].oldest == 220.0 and b[u["3"].id].youngest == 180.0
    assert age_issues(m, ages) == []


def test_a_date_below_tightens_the_unit_above() -> None:
    u = units("1", "2")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2")])
    b = age_brackets(m, [date(u, "1", 100.0, 20.0), date(u, "2", 110.0, 1.0)])
    # 1's own range is 60-140 but it cannot be older than 2's oldest (112)
    assert b[u["1"].id].oldest == pytest.approx(112.0) and b[u["1"].id].youngest == pytest.approx(60.0)


def test_contradicting_dates_are_reported() -> None:
    u = units("1", "2")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2")])
    (i,) = age_issues(m, [date(u, "1", 300.0, 10.0), date(u, "2", 200.0, 10.0)])
    assert i.code == "AGE_CONTRADICTION" and i.value == 100.0
    assert i.message.startswith("unit 1 is dated 300 +- 10 ka but lies above unit 2, dated 200 +- 10 ka")
    # within the ranges is not a contradiction
    assert age_issues(m, [date(u, "1", 205.0, 10.0), date(u, "2", 200.0, 10.0)]) == []


def test_horizon_bracket_spans_its_units(demo_site) -> None:  # type: ignore[no-untyped-def]
    from schema.strata import build_matrix as bm

    m = bm(demo_site.units.values(), demo_site.relations)
    u = demo_site.units
    ages = [AgeDetermination(site_id=demo_site.site.id, unit_id=u["102"].id, method="argon_argon", age_ka=1870.0,
                             sigma_ka=5.0), AgeDetermination(site_id=demo_site.site.id, unit_id=u["104"].id,
                                                              method="argon_argon", age_ka=1950.0, sigma_ka=10.0)]
    b = age_brackets(m, ages)
    # 103 (H3) lies between the tuff 102 (same as 204, 302) and the clay 104
    assert (b[u["103"].id].youngest, b[u["103"].id].oldest) == (1860.0, 1970.0)
    # the tuff's date reaches every unit recorded as the same bed
    assert b[u["302"].id].dated and b[u["302"].id].youngest == 1860.0
    hb = horizon_brackets(b, m, list(demo_site.horizons.values()))
    # H3 also holds 205 in TR2, with nothing dated beneath it (1860 to ?); the horizon is taken as one layer,
    # inside both its units' brackets: 103's 1860 to 1970 (issue 17; before, the span 1860 to ?)
    assert (hb[demo_site.horizons["H3"].id].youngest, hb[demo_site.horizons["H3"].id].oldest) == (1860.0, 1970.0)
    # 104 carries its own date (1950 +- 10): its bracket is that date's two-sigma range
    assert (b[u["104"].id].youngest, b[u["104"].id].oldest) == (1930.0, 1970.0)
    assert hb[demo_site.horizons["H4"].id].dated


def test_a_date_without_a_lab_code_is_named_by_method_and_age() -> None:
    """Issue 18: no id prefixes in messages; a date with no lab code is named by its method and age."""
    u = units("1", "2")
    m = build_matrix(u.values(), [rel(u, "1", "above", "2")])
    upper = date(u, "1", 300.0, 10.0).model_copy(update={"lab_code": None})
    (i,) = age_issues(m, [upper, date(u, "2", 200.0, 10.0)])
    assert i.label == "argon-argon date 300 +- 10 ka on unit 1"
    stray = AgeDetermination(site_id=SITE, unit_id=u["1"].id.__class__(int=77), method="luminescence", age_ka=120.0,
                             sigma_ka=8.0)
    (lost,) = age_issues(m, [stray])
    assert (lost.code, lost.message) == ("AGE_UNKNOWN_UNIT",
                                         "luminescence date 120 +- 8 ka names a unit that is not recorded")
