"""The tablet's controllers with no window: day start, recording (shot, GNSS, tape, sieve), live checks,
corrections and confirmations, voids, units and relations, level points and the cautions."""

from __future__ import annotations

import datetime as dt

import pytest

from mobile.controllers import FindController, FindFilter, FindListController, Position, UnitsController
from mobile.instruments import ShotSimulator
from schema.demo_site import fit_demo_grid
from schema.errors import CautionUnanswered, RecordInvalid, SetupNotReady
from schema.records import Find, LevelPoint, Relation, SafetyCheck, Sample, Shot, Unit
from schema.survey.simulate import gnss_epoch
from tests.helpers import start_field_day


@pytest.fixture
def field(tablet, demo_site):  # type: ignore[no-untyped-def]
    """The tablet with a fitted site grid, the day started on TR1 unit 101 and the instrument accepted."""
    site, _fit, _poly = fit_demo_grid(demo_site)
    demo_site.site = tablet.put(site)
    days, truth = start_field_day(tablet, demo_site)
    return tablet, demo_site, days, ShotSimulator(truth)


def test_day_start_names_each_wrong_choice(tablet, demo_site):  # type: ignore[no-untyped-def]
    from mobile.controllers import DayController

    with pytest.raises(RecordInvalid) as exc:
        DayController(tablet).start(site_code="VLM", season_label="1999", trench_code="TR9", recorder="ak")
    assert exc.value.fields == ["season", "trench", "recorder"]
    assert "type 2-4 capital letters, e.g. AK" in str(exc.value)


def test_day_resumes_after_a_restart(field):  # type: ignore[no-untyped-def]
    from mobile.controllers import DayController

    store, _demo, days, _sim = field
    again = DayController(store).resume()
    assert again is not None
    assert (again.trench.code, again.recorder, again.unit.code) == ("TR1", "AK", "101")
    assert again.setup is not None and again.setup.id == days.day.setup.id


def test_setup_review_shows_residuals_and_the_laser_check_is_kept(field):  # type: ignore[no-untyped-def]
    store, _demo, days, _sim = field
    (laser,) = store.list(SafetyCheck, kind="laser")
    assert laser.answer == "laser class 3R; acknowledged by AK"
    assert days.review is None  # accepted
    # the residuals of exact readings are zero to the printed precision
    review = days.set_up_on_point(station="CP1", backsights=[
        ("CP2", ShotSimulator(days.day.setup).shot_line(1030.0, 1992.0, 99.874, target_height_m=1.5))],
        instrument_height_m=1.552)
    assert review.lines == ["CP2: angle +0.0000 deg, distance +0.0 mm"]


def test_a_plotted_find_is_saved_with_its_shot_and_passes_the_checks(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "obsidian", "length_mm": "23.5", "count": "1"},
                         position=Position("shot", shot_line=sim.shot_line(1001.25, 2001.5, 99.81)))
    f = saved.find
    assert (f.number, f.recovery, f.position_source, f.length_mm) == (1, "plotted", "total_station", 23.5)
    # the BKS line carries 0.0001 deg and 0.1 mm: 10 m away that is within 0.1 mm of the target
    assert f.e == pytest.approx(1001.25, abs=1e-4) and f.z == pytest.approx(99.81, abs=1e-4)
    assert store.get(Shot, f.shot_id).raw_line.startswith("BKS,1,")
    assert saved.clean, saved.issues


def test_a_find_in_the_wrong_unit_is_flagged_then_corrected(field):  # type: ignore[no-untyped-def]
    store, demo, days, sim = field
    finds = FindController(store, days)
    # 99.40 lies in unit 102 (100.00 - 0.35 - 0.20 .. 99.65), not in 101
    saved = finds.record(category="fossil", values={"material": "tooth", "taxon": "Suidae"},
                         position=Position("shot", shot_line=sim.shot_line(1002.0, 2001.0, 99.55)))
    codes = [i.code for i in saved.issues]
    assert "POS_BELOW_UNIT" in codes, codes
    assert FindListController(store).rows(FindFilter(unresolved_only=True))[0]["number"] == saved.find.number
    fixed = finds.edit(saved.find.id, {"unit_code": "102"})
    assert fixed.find.unit_id == demo.units["102"].id
    assert "POS_BELOW_UNIT" not in [i.code for i in fixed.issues]
    assert FindListController(store).rows(FindFilter(unresolved_only=True)) == []


def test_a_flagged_find_can_be_confirmed_with_a_reason(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1002.0, 2001.0, 99.55)))
    code = saved.issues[0].code
    with pytest.raises(RecordInvalid, match="a confirmation needs a reason"):
        finds.confirm(saved.find.id, code, "  ")
    kept = finds.confirm(saved.find.id, code, "piece pressed down into the tuff by trampling")
    assert kept.notes.endswith(f"[confirmed {code}: piece pressed down into the tuff by trampling]")
    assert [c["confirmed_reason"] for c in finds.open_checks(saved.find.id) if c["code"] == code] == [
        "piece pressed down into the tuff by trampling"]
    assert FindListController(store).rows(FindFilter(unresolved_only=True)) == []


def test_gnss_find_needs_rtk_fixed_or_an_override(field):  # type: ignore[no-untyped-def]
    store, demo, days, _sim = field
    finds = FindController(store, days)
    at = dt.datetime.now(dt.timezone.utc)
    days.feed_gnss(gnss_epoch(demo.site, 1003.0, 2002.0, 99.9, at, quality=5))
    assert days.gnss.status().startswith("RTK float")
    from schema.errors import FixNotAccepted

    with pytest.raises(FixNotAccepted):
        finds.record(category="artifact", values={"material": "basalt"}, position=Position("gnss"))
    status = days.feed_gnss(gnss_epoch(demo.site, 1003.0, 2002.0, 99.9, at, quality=4))
    assert status == "RTK fixed, HDOP 0.7, sigma N/E/h 0.8/0.7/1.5 cm"
    saved = finds.record(category="artifact", values={"material": "basalt"}, position=Position("gnss"))
    assert saved.find.position_source == "gnss"
    assert saved.find.e == pytest.approx(1003.0, abs=0.002) and saved.find.n == pytest.approx(2002.0, abs=0.002)


def test_tape_and_sieve_finds(field):  # type: ignore[no-untyped-def]
    store, demo, days, _sim = field
    finds = FindController(store, days)
    taped = finds.record(category="artifact", values={"material": "quartz"}, position=Position(
        "tape", tape_from="CP1", tape_east_m=6.0, tape_north_m=11.0, tape_depth_m=0.7))
    assert (taped.find.e, taped.find.n, taped.find.z) == (1001.0, 2001.0, pytest.approx(99.812))
    assert taped.find.position_sigma_m == 0.02
    sieved = finds.record(category="fossil", values={"material": "bone"}, position=Position("sieve", spit=2, bucket="B-17"))
    assert (sieved.find.recovery, sieved.find.e, sieved.find.bucket) == ("sieved", None, "B-17")
    assert sieved.find.spit_id == demo.spits["101"][1].id
    with pytest.raises(RecordInvalid, match="unit 101 has no spit 9"):
        finds.record(category="fossil", values={"material": "bone"}, position=Position("sieve", spit=9))
    with pytest.raises(RecordInvalid) as exc:
        finds.record(category="artifact", values={"material": "quartz"}, position=Position("tape", tape_from="CP1"))
    assert exc.value.fields == ["tape_east_m", "tape_north_m", "tape_depth_m"]


def test_a_sample_is_saved_with_its_details_or_not_at_all(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    line = sim.shot_line(1001.5, 2002.5, 99.8)
    with pytest.raises(RecordInvalid) as exc:
        finds.record(category="sample", values={"material": "sediment", "purpose": "pollen"}, position=Position("shot", shot_line=line))
    assert "container" in exc.value.fields
    assert store.count(Find) == 0 and store.count(Shot) == 0  # nothing half-written
    saved = finds.record(category="sample", values={"material": "sediment", "purpose": "pollen", "container": "foil + bag",
                                                    "mass_g": "120"}, position=Position("shot", shot_line=line))
    sample = store.list(Sample, find_id=saved.find.id)[0]
    assert (sample.purpose, sample.mass_g) == ("pollen", 120.0)


def test_fields_follow_the_category(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    assert "taxon" in [f.name for f in finds.form("fossil")]
    assert "taxon" not in [f.name for f in finds.form("artifact")]
    with pytest.raises(RecordInvalid, match="taxon: a artifact does not take this field"):
        finds.record(category="artifact", values={"material": "chert", "taxon": "Bovidae"},
                     position=Position("shot", shot_line=sim.shot_line(1001, 2001, 99.8)))
    with pytest.raises(RecordInvalid, match=r"weight_g: 'heavy' is not a number"):
        finds.record(category="artifact", values={"material": "chert", "weight_g": "heavy"},
                     position=Position("shot", shot_line=sim.shot_line(1001, 2001, 99.8)))


def test_no_shot_without_an_accepted_setup(tablet, demo_site):  # type: ignore[no-untyped-def]
    from mobile.controllers import DayController

    days = DayController(tablet)
    days.start(site_code="VLM", season_label="2026", trench_code="TR1", recorder="AK")
    days.choose_unit("101")
    with pytest.raises(SetupNotReady, match="no instrument setup has been accepted today"):
        FindController(tablet, days).record(category="artifact", values={"material": "chert"},
                                            position=Position("shot", shot_line="BKS,1,1,90,5,1.5,0,deg*00"))


def test_possible_human_remains_stop_until_someone_is_notified(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    line = sim.shot_line(1001.2, 2001.2, 99.8)
    with pytest.raises(CautionUnanswered, match="Stop work at this spot"):
        finds.record(category="fossil", values={"material": "bone"}, position=Position("shot", shot_line=line),
                     possible_human_remains=True)
    assert store.count(Find) == 0
    saved = finds.record(category="fossil", values={"material": "bone"}, position=Position("shot", shot_line=line),
                         possible_human_remains=True, human_remains_notified="site director JT, 10:40; police post by radio")
    assert saved.find.human_remains is True
    (check,) = store.list(SafetyCheck, kind="human_remains")
    assert (check.find_id, check.notified) == (saved.find.id, "site director JT, 10:40; police post by radio")


def test_deep_levels_ask_for_the_shoring_check_once(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    units = UnitsController(store, days)
    days.choose_unit("104")
    # the trench surface is at 100.00 (unit 101's top); 1.25 m down is past the site's 1.2 m
    point, cautions = units.level_point(unit="104", surface="bottom", shot_line=sim.shot_line(1002, 2001, 98.75))
    assert store.get(LevelPoint, point.id).z == pytest.approx(98.75)
    (caution,) = cautions
    assert caution.kind == "shoring" and caution.depth_m == pytest.approx(1.25)
    assert "1.25 m below the trench's surface, past the 1.20 m set for this site" in caution.text
    days.answer_caution(caution, "east face benched, checked by JT")
    _p, again = units.level_point(unit="104", surface="bottom", shot_line=sim.shot_line(1003, 2001, 98.74))
    assert again == []
    _p, deeper = units.level_point(unit="104", surface="bottom", shot_line=sim.shot_line(1003, 2002, 98.40))
    assert [c.kind for c in deeper] == ["shoring"]
    # a find that deep asks too (nothing answered for 1.6 m yet)
    saved = FindController(store, days).record(category="artifact", values={"material": "basalt"},
                                               position=Position("shot", shot_line=sim.shot_line(1002, 2002, 98.40)))
    assert [c.kind for c in saved.cautions] == ["shoring"]


def test_edit_and_void_keep_the_number(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1001.25, 2001.5, 99.81)))
    edited = finds.edit(saved.find.id, {"material": "obsidian", "weight_g": "3.5"})
    assert (edited.find.material, edited.find.weight_g) == ("obsidian", 3.5)
    with pytest.raises(RecordInvalid, match="a void needs a reason"):
        finds.void(saved.find.id, "")
    voided = finds.void(saved.find.id, "double entry of find 2")
    assert (voided.voided, voided.number) == (True, saved.find.number)
    assert store.get(Find, saved.find.id).void_reason == "double entry of find 2"
    assert finds.next_number() == saved.find.number + 1  # a voided number is never given again


def test_units_relations_and_matrix_checks(field):  # type: ignore[no-untyped-def]
    store, _demo, days, _sim = field
    units = UnitsController(store, days)
    new = units.save_unit({"code": "105", "kind": "cut", "description": "pit cut", "munsell": "", "status": "open"})
    assert (new.trench_id, new.recorder, new.kind) == (days.day.trench.id, "AK", "cut")
    with pytest.raises(RecordInvalid) as exc:
        units.save_unit({"code": "106", "kind": "fill", "munsell": "10YR 5/3"})
    assert exc.value.fields == ["munsell_condition"]
    fill = units.save_unit({"code": "106", "kind": "fill", "munsell": "10YR 5/3", "munsell_condition": "moist",
                            "texture": "loamy_sand"})
    ok = units.relate(upper="106", lower="105", kind="fills")
    assert ok.issues == []
    assert [(r.upper, r.kind, r.lower, r.voided) for r in units.relations("105")] == [("106", "fills", "105", False)]
    # 101 over 106 over ... 101: a cycle is shown at once, not refused
    units.relate(upper="105", lower="101", kind="cuts")
    cyc = units.relate(upper="101", lower="106", kind="above")
    assert "MATRIX_CYCLE" in [i.code for i in cyc.issues]
    assert store.count(Relation) == len(field[1].relations) + 3  # the demo's eleven and these three
    closed = units.save_unit({"status": "closed"}, code=fill.code)
    assert closed.status == "closed" and closed.closed_on == days.day.now().date()
    assert store.list(Unit, code="106")[0].status == "closed"


def test_a_wrong_relation_is_voided_with_a_reason(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 12: the cycle's fix points at Void; voiding the wrong relation ends the cycle, the relation is
    kept (voided, with its reason, as a new version that syncs) and listed as voided."""
    from schema.sync.tables import field_version
    import sqlalchemy as sa

    store, _demo, days, _sim = field
    units = UnitsController(store, days)
    units.save_unit({"code": "150", "kind": "deposit"})
    units.relate(upper="150", lower="101", kind="above")
    cyc = units.relate(upper="101", lower="150", kind="above")
    (cycle,) = [i for i in cyc.issues if i.code == "MATRIX_CYCLE"]
    assert "void the wrong one with a reason (Units screen: choose the unit, then Void beside the relation; " in cycle.fix
    with pytest.raises(RecordInvalid) as exc:
        units.void_relation(cyc.relation.id, "  ")
    assert str(exc.value) == ("void of the relation refused, nothing was saved. reason: voiding a relation needs a "
                              "reason. Fix: say why the relation is wrong, e.g. 'recorded the wrong way round'")
    done = units.void_relation(cyc.relation.id, "101 is under 150: recorded the wrong way round")
    assert "MATRIX_CYCLE" not in [i.code for i in done.issues]
    assert done.line.words() == "VOIDED 101 above 150 (101 is under 150: recorded the wrong way round)"
    kept = store.get(Relation, cyc.relation.id)
    assert (kept.voided, kept.void_reason) == (True, "101 is under 150: recorded the wrong way round")
    with store.read() as conn:  # the void is a field version like every edit, so it reaches the camp
        fields = {r.field for r in conn.execute(sa.select(field_version.c.field)
                                                 .where(field_version.c.record_id == cyc.relation.id))}
    assert {"voided", "void_reason"} <= fields, fields
    assert [(r.words(), r.voided) for r in units.relations("150")] == [
        ("150 above 101", False), ("VOIDED 101 above 150 (101 is under 150: recorded the wrong way round)", True)]
    with pytest.raises(RecordInvalid, match="it is already voided"):
        units.void_relation(cyc.relation.id, "again")


def test_find_list_filters(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    finds.record(category="artifact", values={"material": "obsidian"}, position=Position("shot", shot_line=sim.shot_line(1001, 2001, 99.8)))
    finds.record(category="fossil", values={"material": "tooth", "taxon": "Hippopotamidae"},
                 position=Position("shot", shot_line=sim.shot_line(1001.5, 2001, 99.8)))
    days.choose_unit("102")
    finds.record(category="fossil", values={"material": "bone"}, position=Position("sieve", spit=1, bucket="7"))
    listing = FindListController(store)
    assert [r["number"] for r in listing.rows()] == [3, 2, 1]
    assert [r["number"] for r in listing.rows(FindFilter(category="fossil"))] == [3, 2]
    assert [r["number"] for r in listing.rows(FindFilter(unit="101"))] == [2, 1]
    assert [r["number"] for r in listing.rows(FindFilter(text="hippo"))] == [2]
    assert [r["number"] for r in listing.rows(FindFilter(day=dt.datetime.now(dt.timezone.utc).date()))] == [3, 2, 1]
    assert listing.rows(FindFilter(day=dt.date(2020, 1, 1))) == []
    assert listing.rows(FindFilter(text="2"))[0]["text"].startswith("2  101  fossil tooth  plotted")


def test_gnss_find_without_proj_uses_the_site_polynomial(field, monkeypatch):  # type: ignore[no-untyped-def]
    """A tablet build with no PROJ (Android) places a GNSS find with the polynomial the server fitted; it agrees
    with the pyproj answer within the polynomial's stored maximum error."""
    import schema.survey.crs as crs_mod
    import schema.survey.grid as grid_mod

    store, demo, days, _sim = field
    at = dt.datetime.now(dt.timezone.utc)
    lines = gnss_epoch(demo.site, 1003.0, 2002.0, 99.9, at, quality=4)  # made with pyproj (the simulator)
    days.feed_gnss(lines)
    with_proj = FindController(store, days).record(category="artifact", values={"material": "basalt"},
                                                   position=Position("gnss")).find
    monkeypatch.setattr(crs_mod, "have_proj", lambda: False)
    monkeypatch.setattr(grid_mod, "have_proj", lambda: False)
    without = FindController(store, days).record(
        category="artifact", values={"material": "basalt"},
        position=Position("gnss", old_fix_reason="the same fix placed twice to compare the two methods")).find
    limit = demo.site.grid_polynomial.max_error_m
    assert abs(without.e - with_proj.e) <= limit and abs(without.n - with_proj.n) <= limit
    assert without.e != with_proj.e or without.n != with_proj.n  # a different method really ran


def test_find_list_pages_and_counts(field):  # type: ignore[no-untyped-def]
    store, _demo, days, _sim = field
    finds = FindController(store, days)
    for i in range(7):
        finds.record(category="artifact", values={"material": "chert"}, position=Position("sieve", spit=1, bucket=str(i)))
    listing = FindListController(store)
    assert listing.count(FindFilter()) == 7 and listing.count(FindFilter(category="fossil")) == 0
    first, second = listing.rows(limit=3), listing.rows(limit=3, offset=3)
    assert [r["number"] for r in first + second + listing.rows(limit=3, offset=6)] == [7, 6, 5, 4, 3, 2, 1]


def _other_tablets_find(store, demo, number: int) -> Find:  # type: ignore[no-untyped-def]
    """A find of another tablet, as a pull brings it (its device's blocks are not on this tablet)."""
    from schema.records import Device
    from tests.helpers import find_data

    other = Device(label="TAB-2", role="recorder")
    store.put(other)
    return store.put(Find.model_validate(find_data(demo, number=number, device_id=other.id, recorder="JT")))


def test_a_number_edit_follows_the_block_rule_of_a_save(field):  # type: ignore[no-untyped-def]
    store, demo, days, sim = field
    finds = FindController(store, days)
    _other_tablets_find(store, demo, 1001)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1001.25, 2001.5, 99.81)))
    with pytest.raises(RecordInvalid) as refused:
        finds.edit(saved.find.id, {"number": 1001})
    assert str(refused.value) == (
        "find refused, nothing was saved. number: find number 1001 is outside this device's number blocks (1-100). "
        "Fix: take the next number from the device, or ask the data manager for a new block")
    assert store.get(Find, saved.find.id).number == saved.find.number
    assert finds.next_number() == saved.find.number + 1  # the refused edit took no number


def test_a_number_edit_follows_the_duplicate_rule_of_a_save(field):  # type: ignore[no-untyped-def]
    from schema.errors import DuplicateRecord

    store, demo, days, sim = field
    finds = FindController(store, days)
    first, second = (finds.record(category="artifact", values={"material": "chert"},
                                  position=Position("shot", shot_line=sim.shot_line(1001.25, 2001.5 + k, 99.81)))
                     for k in range(2))
    theirs = _other_tablets_find(store, demo, 7)  # in this tablet's block: a camp renumbering put it there
    for number in (first.find.number, theirs.number):
        with pytest.raises(DuplicateRecord) as refused:
            finds.edit(second.find.id, {"number": number})
        assert str(refused.value) == (f"find with number={number} already exists; choose another number or edit the "
                                      "existing record")
    moved = finds.edit(second.find.id, {"number": 40})  # free, inside the block: taken
    assert moved.find.number == 40 and store.get(Find, second.find.id).number == 40
    assert finds.next_number() == 41


def test_the_next_number_counts_only_numbers_inside_the_tablets_blocks(field):  # type: ignore[no-untyped-def]
    store, demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1001.25, 2001.5, 99.81)))
    # the camp renumbered one of this tablet's finds to 1001 (outside its block 1-100); it arrives at a pull
    store.put(store.get(Find, saved.find.id).model_copy(update={"number": 1001}))
    assert finds.next_number() == 1
    again = finds.record(category="artifact", values={"material": "basalt"},
                         position=Position("shot", shot_line=sim.shot_line(1001.25, 2002.5, 99.81)))
    assert again.find.number == 1
    # a find whose number the camp gave stays editable: an unchanged number is not judged again
    edited = finds.edit(saved.find.id, {"notes": "renumbered at camp"})
    assert (edited.find.number, edited.find.notes) == (1001, "renumbered at camp")


def test_a_correction_carries_a_new_position_and_unit_and_says_what_was_written(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 1: correcting find N writes the new shot and the new unit, and names exactly those."""
    store, demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1002.0, 2001.0, 99.70)))
    again = finds.edit(saved.find.id, {"material": "chert"}, unit_code="102",
                       position=Position("shot", shot_line=sim.shot_line(1002.0, 2001.0, 99.45)))
    kept = store.get(Find, saved.find.id)
    assert kept.unit_id == demo.units["102"].id and kept.z == pytest.approx(99.45, abs=1e-4)
    assert kept.shot_id != saved.find.shot_id and store.get(Shot, kept.shot_id).raw_line.startswith("BKS,1,")
    assert again.written == ["unit 101 -> 102", f"Z {saved.find.z:.3f} -> {kept.z:.3f}"]
    # no new shot: the position is kept, and only the field that changed is named
    plain = finds.edit(saved.find.id, {"material": "obsidian"}, position=Position("shot", shot_line=""))
    assert plain.written == ["material chert -> obsidian"]
    assert store.get(Find, saved.find.id).z == kept.z and store.count(Find) == 1


def test_a_gnss_fix_is_not_reused_or_stale_without_a_reason(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 2: a fix older than the limit, or already used, needs a fresh reading or a reason."""
    from schema.errors import FixNotAccepted

    store, demo, days, _sim = field
    finds = FindController(store, days)
    at = dt.datetime.now(dt.timezone.utc)
    days.feed_gnss(gnss_epoch(demo.site, 1003.0, 2002.0, 99.9, at, quality=4), now=at - dt.timedelta(seconds=330))
    assert days.gnss_age_s() == pytest.approx(330, abs=5)
    assert "read 5.5 min ago. OLD FIX: the fix is 5.5 min old (the limit is 60 s)" in days.gnss_line()
    with pytest.raises(FixNotAccepted, match=r"the fix is 5\.5 min old \(the limit is 60 s\)\. Tap Read receiver"):
        finds.record(category="artifact", values={"material": "basalt"}, position=Position("gnss"))
    assert store.count(Find) == 0
    days.feed_gnss(gnss_epoch(demo.site, 1003.5, 2002.0, 99.9, at, quality=4))
    first = finds.record(category="artifact", values={"material": "basalt"}, position=Position("gnss")).find
    with pytest.raises(FixNotAccepted, match=f"the fix already placed find {first.number}"):
        finds.record(category="artifact", values={"material": "chert"}, position=Position("gnss"))
    second = finds.record(category="artifact", values={"material": "chert"},
                          position=Position("gnss", old_fix_reason="two flakes touching; one point for both")).find
    assert second.notes == (f"[GNSS: the fix already placed find {first.number}; used because: two flakes touching; "
                            "one point for both]")


def test_a_level_that_puts_finds_out_of_bounds_says_how_many(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 5: a new top level on a unit re-runs its finds' checks and names the finds that changed."""
    store, _demo, days, sim = field
    finds = FindController(store, days)
    saved = [finds.record(category="artifact", values={"material": "chert"},
                          position=Position("shot", shot_line=sim.shot_line(1001.98 + 0.02 * k, 2001.5, 99.80))).find
             for k in range(3)]
    assert all(not finds.open_checks(f.id) for f in saved)
    units = UnitsController(store, days)
    # a top of unit 101 shot at 99.70 puts the three finds (at 99.80) above their unit
    units.level_point(unit="101", surface="top", shot_line=sim.shot_line(1002.0, 2001.5, 99.70))
    got = units.last_recheck
    assert got.checked == 3 and sorted(got.now_failing) == [f.number for f in saved] and got.cleared == []
    assert got.sentence("unit 101") == ("Checks run again on 3 finds of unit 101: CHECK: 3 finds now fail a check "
                                        "(1, 2, 3; see Finds, Open checks).")
    assert all("POS_ABOVE_UNIT" in {c["code"] for c in finds.open_checks(f.id)} for f in saved)
    assert FindListController(store).count(FindFilter(unresolved_only=True)) == 3


def test_the_heat_caution_is_recorded_like_the_lasers(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 9: the heat caution shown at day start is acknowledged and kept as a safety check."""
    store, _demo, days, _sim = field
    assert days.heat_acknowledged() is None
    with pytest.raises(RecordInvalid, match="heat: the heat caution was not acknowledged. Fix: type who read it"):
        days.acknowledge_heat(by=" ")
    check = days.acknowledge_heat(by="AK")
    assert (check.kind, check.answer, check.trench_id) == ("heat", "heat caution read at day start; acknowledged by AK",
                                                           days.day.trench.id)
    assert days.heat_acknowledged().id == check.id


def test_labels_are_for_this_tablets_finds_and_can_be_written_again(field, tmp_path):  # type: ignore[no-untyped-def]
    """Issue 18 item 8: another tablet's finds stay out of the queue; a range is written again on demand."""
    from mobile.controllers import LabelQueue
    from schema.errors import RecordNotFound

    store, demo, days, _sim = field
    finds = FindController(store, days)
    mine = [finds.record(category="artifact", values={"material": "other_stone"},
                         position=Position("sieve", spit=1, bucket=str(k))).find for k in range(3)]
    _other_tablets_find(store, demo, 1001)
    queue = LabelQueue(store)
    assert [f.number for f in queue.queue()] == [f.number for f in mine]
    queue.print_queue(tmp_path)
    assert queue.queue() == []
    with pytest.raises(RecordNotFound, match="no labels are waiting"):
        queue.print_queue(tmp_path)
    again = queue.in_range(2, 3)
    assert [f.number for f in again] == [2, 3]
    assert queue.print_queue(tmp_path, finds=again).exists()
    with pytest.raises(RecordNotFound, match="this tablet holds no finds numbered 1001 to 1001"):
        queue.in_range(1001, 1001)


def test_words_not_internal_names(tablet, demo_site):  # type: ignore[no-untyped-def]
    """Issue 18 item 11: no empty quotes or field keys reach the screen."""
    from mobile.controllers import DayController

    with pytest.raises(RecordInvalid) as exc:
        DayController(tablet).start(site_code="VLM", season_label="2026", trench_code="TR1", recorder="")
    assert str(exc.value) == ("day start refused, nothing was saved. recorder: no initials were typed. "
                              "Fix: type 2-4 capital letters, e.g. AK")


def test_a_refused_void_or_confirmation_is_not_called_a_refused_find(field):  # type: ignore[no-untyped-def]
    store, _demo, days, sim = field
    finds = FindController(store, days)
    saved = finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1002.0, 2001.0, 99.55)))
    with pytest.raises(RecordInvalid) as void:
        finds.void(saved.find.id, " ")
    n = saved.find.number
    assert str(void.value) == (f"void of find {n} refused, nothing was saved. reason: a void needs a reason. Fix: say "
                               "why the find is voided")
    with pytest.raises(RecordInvalid, match=f"^void of find {n} refused, nothing was saved. void_reason: "):
        finds.void(saved.find.id, "x" * 501)  # longer than the record keeps: the store's check, still the void's
    with pytest.raises(RecordInvalid) as confirm:
        finds.confirm(saved.find.id, saved.issues[0].code, "")
    assert str(confirm.value).startswith(f"confirmation of find {n} refused, nothing was saved. reason: a "
                                         "confirmation needs a reason")
    with pytest.raises(RecordInvalid, match=f"^confirmation of find {n} refused, nothing was saved. reason: "):
        finds.confirm(saved.find.id, saved.issues[0].code, "y" * 4001)  # the notes would pass their 4000 characters
    assert not store.get(Find, saved.find.id).voided and "y" * 50 not in store.get(Find, saved.find.id).notes
    assert all(c["confirmed_reason"] is None for c in finds.open_checks(saved.find.id))  # nothing half-written
    with pytest.raises(RecordInvalid, match="shot: no position was taken: there is no shot for this find. Fix: tap "
                                            "Take shot"):
        finds.record(category="artifact", values={"material": "chert"}, position=Position("shot", shot_line=""))


def test_a_sample_without_material_is_offered_only_sample_materials(field):  # type: ignore[no-untyped-def]
    """Issue 18 item 11: the fix lists the sample materials from schema.vocab, never an artifact's material."""
    from schema import vocab

    store, _demo, days, sim = field
    finds = FindController(store, days)
    with pytest.raises(RecordInvalid) as exc:
        finds.record(category="sample", values={"count": "1"},
                     position=Position("shot", shot_line=sim.shot_line(1001, 2001, 99.8)))
    (problem,) = exc.value.problems
    assert problem.field == "material"
    assert problem.fix == "add it: use one of: " + ", ".join(vocab.MATERIALS["sample"])
    assert "obsidian" not in str(exc.value)
