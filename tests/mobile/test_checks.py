"""Live checks on the tablet: the shared rules, run on the tablet's data right after a save."""

from __future__ import annotations

from mobile.checks import check_find, check_matrix
from mobile.store import TabletStore
from schema.demo_site import DemoSite
from schema.records import Find, Relation
from tests.helpers import find_data


def test_a_clean_find_shows_nothing(tablet: TabletStore, demo_site: DemoSite) -> None:
    find = tablet.save_find(find=find_data(demo_site))
    assert check_find(tablet, find) == []


def test_wrong_unit_is_shown_at_once_and_the_find_is_kept(tablet: TabletStore, demo_site: DemoSite) -> None:
    find = tablet.save_find(find=find_data(demo_site, number=3, z=99.30))
    (shown,) = check_find(tablet, find)
    assert str(shown) == ("find 3: Z 99.300 is 0.350 m below the base of unit 101 at this point; "
                          "check the unit or the target height")
    assert tablet.count(Find) == 1  # validation never blocks the save


def test_other_finds_do_not_leak_into_a_live_check(tablet: TabletStore, demo_site: DemoSite) -> None:
    tablet.save_find(find=find_data(demo_site, number=1, z=99.30))
    good = tablet.save_find(find=find_data(demo_site, number=2))
    assert check_find(tablet, good) == []


def test_a_reversed_relation_shows_the_cycle(tablet: TabletStore, demo_site: DemoSite) -> None:
    assert check_matrix(tablet) == []
    u = demo_site.units
    tablet.add(Relation(site_id=demo_site.site.id, upper_unit_id=u["104"].id, lower_unit_id=u["101"].id, kind="above"))
    (cycle,) = check_matrix(tablet)
    assert cycle.code == "MATRIX_CYCLE" and "101" in cycle.message and "104" in cycle.message
