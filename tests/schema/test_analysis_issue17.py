"""The analyst's numbers, pure: cut and fill counted once, overlaps named, densities of bags and of items, finds
marked (and, in strict mode, left out) for their unit's errors and open conflicts, and age brackets computed
outside a matrix cycle and tightened by the horizon order. Every expected value is worked by hand beside it."""

from __future__ import annotations

import datetime as dt
import uuid

import pytest

from schema.analysis import (
    CountRow, outline_area_m2, select_finds, unit_errors, unit_volumes, volume_overlaps,
)
from schema.records import Find, LevelPoint, Relation, Spit, Unit
from schema.strata.dating import bracket_units, horizon_age_brackets
from schema.strata.graph import strongly_connected
from schema.strata.matrix import build_matrix
from schema.strata.validate import validate

SITE, TRENCH = uuid.uuid4(), uuid.uuid4()
SQUARE = [(0.0, 0.0), (2.0, 0.0), (2.0, 2.0), (0.0, 2.0)]  # 2 m x 2 m = 4 m2


def _unit(code: str, kind: str = "deposit") -> Unit:
    return Unit(site_id=SITE, trench_id=TRENCH, code=code, kind=kind, opened_on=dt.date(2026, 7, 1), recorder="AK")


def _levels(unit: Unit, top: float, bottom: float) -> list[LevelPoint]:
    return [LevelPoint(unit_id=unit.id, surface=s, e=e, n=n, z=z) for s, z in (("top", top), ("bottom", bottom))
            for e, n in SQUARE]


def _spit(unit: Unit, number: int, top: float, bottom: float, area: float = 4.0) -> Spit:
    return Spit(unit_id=unit.id, number=number, top_z=top, bottom_z=bottom, area_m2=area,
                sieved_volume_l=round((top - bottom) * area * 1000, 3))


def test_a_cut_has_no_volume_and_its_fill_carries_it() -> None:
    # A channel cut 202 recorded by its surfaces (100.0 to 99.5 over 4 m2 = 2.0 m3 of hole) and its fill 203 dug
    # in one spit over the same space (4 m2 x 0.5 m = 2.0 m3). By hand: the earth dug is 2.0 m3, not 4.0.
    cut, fill = _unit("202", "cut"), _unit("203", "fill")
    vols = unit_volumes([_spit(fill, 1, 100.0, 99.5)], units=[cut, fill], levels=_levels(cut, 100.0, 99.5),
                        outlines={TRENCH: SQUARE})
    assert cut.id not in vols
    assert vols[fill.id].excavated_m3 == pytest.approx(2.0)
    assert sum(v.excavated_m3 for v in vols.values()) == pytest.approx(2.0)


def test_units_whose_volumes_share_space_are_named_with_the_shared_volume() -> None:
    # 301 dug in spits from 100.0 to 99.5 over the whole 4 m2; 302 recorded by surfaces from 99.8 to 99.2. They
    # share 99.8 to 99.5: 0.3 m x 4 m2 = 1.2 m3 (by hand). 303 lies below both (99.2 to 99.0): it touches 302
    # at one boundary and shares nothing.
    a, b, c = _unit("301"), _unit("302"), _unit("303")
    spits = [_spit(a, 1, 100.0, 99.75), _spit(a, 2, 99.75, 99.5)]
    levels = _levels(b, 99.8, 99.2) + _levels(c, 99.2, 99.0)
    out = volume_overlaps(spits, units=[a, b, c], levels=levels, outlines={TRENCH: SQUARE})
    assert set(out) == {a.id, b.id}
    assert out[a.id][b.id] == pytest.approx(1.2, rel=1e-6) and out[b.id][a.id] == pytest.approx(1.2, rel=1e-6)
    # a cut is never compared: its space is its fill's
    cut = _unit("304", "cut")
    assert cut.id not in volume_overlaps(spits, units=[a, cut], levels=_levels(cut, 100.0, 99.0),
                                         outlines={TRENCH: SQUARE})


def test_outline_area_by_hand() -> None:
    assert outline_area_m2(SQUARE) == 4.0
    assert outline_area_m2([(1010.0, 2005.0), (1013.0, 2005.0), (1013.0, 2008.0), (1010.0, 2008.0)]) == 9.0


def test_densities_of_bags_and_of_items_are_both_given() -> None:
    # 9 bags of sieved basalt holding 40 pieces, from 12.15 m3 dug and 12150 L sieved (H1 of the demo):
    # bags 9 / 12.15 = 0.7407 per m3, items 40 / 12.15 = 3.2922 per m3; per 10 L: 9 / 1215 and 40 / 1215.
    row = CountRow(("H1", "artifact", "basalt", "sieved"), 9, 40, None, 12.15, 12150.0)
    d = row.as_dict(("horizon", "category", "material", "recovery"))
    assert d["bags_per_m3"] == pytest.approx(9 / 12.15) and d["items_per_m3"] == pytest.approx(40 / 12.15)
    assert d["bags_per_10l"] == pytest.approx(9 / 1215) and d["items_per_10l"] == pytest.approx(40 / 1215)
    assert d["per_m3"] == d["bags_per_m3"] and d["per_10l"] == d["bags_per_10l"]  # the old names keep their meaning
    plotted = CountRow(("H1", "artifact", "basalt", "plotted"), 9, 40, None, 12.15, 12150.0).as_dict(("h", "c", "m", "r"))
    assert plotted["items_per_10l"] is None and plotted["bags_per_10l"] is None  # per 10 L is for sieved finds only


def _find(unit: Unit, number: int) -> Find:
    return Find(number=number, site_id=SITE, season_id=uuid.uuid4(), trench_id=TRENCH, unit_id=unit.id,
                category="artifact", material="chert", recovery="plotted", e=1.0, n=1.0, z=99.9,
                position_source="tape", found_at=dt.datetime(2026, 7, 2, 9, tzinfo=dt.timezone.utc), recorder="AK")


def test_unit_errors_and_open_conflicts_mark_finds_and_strict_leaves_them_out() -> None:
    # 1 above 2 above 3, and 3 above 1 typed by mistake: 1, 2, 3 go round in a circle; 4 lies apart.
    u = {c: _unit(c) for c in ("1", "2", "3", "4")}
    rels = [Relation(site_id=SITE, kind="above", upper_unit_id=u[a].id, lower_unit_id=u[b].id)
            for a, b in (("1", "2"), ("2", "3"), ("3", "1"))]
    m = build_matrix(u.values(), rels)
    cycles = [[x for g in comp for x in m.members[g]] for comp in strongly_connected(m.members, m.edges) if len(comp) > 1]
    doubted = unit_errors(m.issues, cyclic_units=cycles, relations=rels)
    assert set(doubted) == {u["1"].id, u["2"].id, u["3"].id}  # every unit of the circle, not only the one named
    finds = [_find(u["2"], 10), _find(u["4"], 11), _find(u["4"], 12)]
    conflicts = {("find", str(finds[2].id)): ["material"], ("unit", str(u["4"].id)): ["description"]}
    codes = {x.id: x.code for x in u.values()}
    plain = select_finds(finds, m.issues, strict=False, units=doubted, conflicts=conflicts, unit_codes=codes)
    assert len(plain.included) == 3 and not plain.excluded
    assert plain.unit_errors == {finds[0].id: ["MATRIX_CYCLE"]}
    assert plain.conflicts == {finds[1].id: ["unit.description"], finds[2].id: ["find.material", "unit.description"]}
    strict = select_finds(finds, m.issues, strict=True, units=doubted, conflicts=conflicts, unit_codes=codes)
    assert strict.included == []
    why = {x.find.number: (x.code, x.applies_to, x.message) for x in strict.excluded}
    assert why[10][:2] == ("MATRIX_CYCLE", "unit") and why[10][2].startswith("its unit 2: units 1, 2, 3 go round")
    assert why[11] == ("CONFLICT", "conflict", "open conflict on unit.description (find 11, unit 4): resolve it on "
                                               "the Conflicts page")
    assert why[12][:2] == ("CONFLICT", "conflict")


def test_brackets_outside_a_cycle_and_tightened_by_the_horizon_order(demo_site) -> None:  # type: ignore[no-untyped-def]
    u, hz = demo_site.units, list(demo_site.horizons.values())
    # The demo's dates: tuff 102 (= 204 = 302) at 1871 +- 4 ka, clay 104 at 1935 +- 12 ka; two-sigma ranges
    # 1863-1879 and 1911-1959 (by hand). Superposition alone leaves 205 (H3, TR2) with no older limit: nothing
    # dated lies below it in TR2. The horizon order puts H3 above H4, so 205 is younger than 104: at most 1959.
    alone = bracket_units(build_matrix(u.values(), demo_site.relations), demo_site.ages)
    assert (alone.units[u["205"].id].youngest, alone.units[u["205"].id].oldest) == (1863.0, None)
    m = build_matrix(u.values(), demo_site.relations)
    b = bracket_units(m, demo_site.ages, hz)
    assert (b.units[u["205"].id].youngest, b.units[u["205"].id].oldest) == (1863.0, 1959.0)
    assert b.units[u["205"].id].old_from == (u["104"].id,)
    hb = horizon_age_brackets(b, m, hz)
    h4 = hb[demo_site.horizons["H4"].id]  # taken as one layer: inside 104's own 1911-1959 and 303's 1863-?
    assert (h4.youngest, h4.oldest, h4.young_from, h4.old_from) == (1911.0, 1959.0, (u["104"].id,), (u["104"].id,))
    h1 = hb[demo_site.horizons["H1"].id]
    assert (h1.youngest, h1.oldest, h1.reason) == (None, 1879.0, "")
    # A relation typed the wrong way round in TR2 (203 above 201 as well as 201 above 203): before, one circle
    # emptied every bracket of the site; now only 201 and 203 lose theirs, and the rest keep their dates.
    wrong = [*demo_site.relations, Relation(site_id=demo_site.site.id, kind="above", upper_unit_id=u["203"].id,
                                            lower_unit_id=u["201"].id)]
    mc = build_matrix(u.values(), wrong)
    assert mc.reduced is None  # the matrix is cyclic
    bc = bracket_units(mc, demo_site.ages, hz)
    assert bc.cyclic == {u["201"].id, u["203"].id} and u["201"].id not in bc.units
    assert (bc.units[u["104"].id].youngest, bc.units[u["104"].id].oldest) == (1911.0, 1959.0)
    assert (bc.units[u["103"].id].youngest, bc.units[u["103"].id].oldest) == (1863.0, 1959.0)
    h1c = horizon_age_brackets(bc, mc, hz)[demo_site.horizons["H1"].id]
    assert h1c.oldest == 1879.0 and h1c.reason == "units 201, 203 are left out (caught in a matrix cycle)"
    # validation's own brackets (age_brackets.json) are these too: no longer empty on a cyclic matrix
    from schema.strata.data import SiteData

    data = SiteData(site=demo_site.site, trenches=list(demo_site.trenches.values()), units=list(u.values()),
                    relations=wrong, horizons=hz, ages=demo_site.ages)
    assert validate(data).brackets[u["104"].id].oldest == 1959.0


def test_a_horizon_with_no_dated_unit_near_says_why() -> None:
    from schema.records import Horizon

    a, b = _unit("1"), _unit("2")

    h = Horizon(site_id=SITE, code="H9", label="Unit nine", order=1)
    a2 = a.model_copy(update={"horizon_id": h.id})
    m = build_matrix([a2, b], [Relation(site_id=SITE, kind="above", upper_unit_id=a.id, lower_unit_id=b.id)])
    hb = horizon_age_brackets(bracket_units(m, [], [h]), m, [h])
    assert hb[h.id].reason == "no dated unit lies in, above or below it"
    empty = Horizon(site_id=SITE, code="H8", label="Nothing yet", order=2)
    assert horizon_age_brackets(bracket_units(m, [], [h, empty]), m, [empty])[empty.id].reason == \
        "no unit is assigned to this horizon"


def test_a_horizon_order_the_matrix_contradicts_is_left_out_with_a_note() -> None:
    from schema.records import AgeDetermination, Horizon

    h1, h2 = Horizon(site_id=SITE, code="H1", label="upper", order=1), Horizon(site_id=SITE, code="H2", label="lower", order=2)
    # unit 1 (in the lower horizon H2) is recorded above unit 2 (in H1): the two orders disagree (HORIZON_ORDER)
    a = _unit("1").model_copy(update={"horizon_id": h2.id})
    b = _unit("2").model_copy(update={"horizon_id": h1.id})
    m = build_matrix([a, b], [Relation(site_id=SITE, kind="above", upper_unit_id=a.id, lower_unit_id=b.id)])
    dated = AgeDetermination(site_id=SITE, unit_id=b.id, method="other", age_ka=10.0, sigma_ka=1.0)
    br = bracket_units(m, [dated], [h1, h2])
    assert br.notes == ["the horizon order disagrees with the matrix (see the HORIZON_ORDER checks): the brackets "
                        "use the matrix's order alone"]
    # the matrix alone: 1 lies above 2, dated 10 +- 1 ka, so 1 is at most 12 ka old (by hand: 10 + 2 x 1)
    assert (br.units[a.id].youngest, br.units[a.id].oldest, br.units[a.id].old_from) == (None, 12.0, (b.id,))
