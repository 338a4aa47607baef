"""The pure pieces behind the standard exports, each checked against something outside Baulk: the smallest
enclosing circle and the long axis against shapely (GEOS), stage names and boundaries against the ICS chart,
taxon names against the rules of zoological nomenclature, the archive descriptor against the TDWG term list."""

from __future__ import annotations

import math
import random
import xml.etree.ElementTree as ET

import pytest

from schema.chronostrat import CHART, AgeOutsideChart, dwc_geological_terms, unit_at
from schema.dwc import DWC_TERMS, identification, meta_xml
from schema.dwc_termlist import TERM_IRIS
from schema.georef import point_radius, smallest_circle
from schema.section import long_axis, profile, vertical_exaggeration


def test_smallest_circle_matches_geos() -> None:
    import shapely  # GEOS's minimum bounding circle is the outside reference

    rng = random.Random(17)
    for _ in range(200):
        pts = [(rng.uniform(0, 12), rng.uniform(0, 4)) for _ in range(rng.randint(1, 10))]
        cx, cy, r = smallest_circle(pts)
        theirs = shapely.minimum_bounding_circle(shapely.MultiPoint(pts))
        assert r == pytest.approx(shapely.minimum_bounding_radius(shapely.MultiPoint(pts)), abs=1e-7)
        if r > 0:
            assert (cx, cy) == pytest.approx((theirs.centroid.x, theirs.centroid.y), abs=1e-6)


def test_point_radius_of_a_trench_by_hand() -> None:
    # a 4 m x 2 m trench: centre in the middle, radius half the diagonal, sqrt(4 + 1) = 2.236 m (by hand)
    pr = point_radius([(1000, 500), (1004, 500), (1004, 502), (1000, 502)])
    assert (pr.x, pr.y, pr.inside) == (1002, 501, True)
    assert pr.radius == pytest.approx(math.sqrt(5))
    # an L-shaped trench: the circle's centre falls outside, so the point moves onto the trench and the radius
    # grows to cover every corner from there (the corrected center must lie within the feature)
    ell = [(0, 0), (10, 0), (10, 2), (2, 2), (2, 10), (0, 10)]
    pr = point_radius(ell)
    import shapely

    poly = shapely.Polygon(ell)
    assert not pr.inside and poly.buffer(1e-9).contains(shapely.Point(pr.x, pr.y))
    assert pr.radius >= shapely.minimum_bounding_radius(poly)
    assert pr.radius == pytest.approx(max(math.dist((pr.x, pr.y), p) for p in ell))


def test_long_axis_matches_geos_rotated_rectangle() -> None:
    import shapely

    rng = random.Random(3)
    for _ in range(50):
        w, h, a = rng.uniform(1, 10), rng.uniform(1, 10), rng.uniform(0, math.pi)
        corners = [(0, 0), (w, 0), (w, h), (0, h)]
        pts = [(x * math.cos(a) - y * math.sin(a) + 500, x * math.sin(a) + y * math.cos(a) + 200) for x, y in corners]
        axis = long_axis(pts)
        rect = shapely.minimum_rotated_rectangle(shapely.Polygon(pts))
        c = list(rect.exterior.coords)
        sides = sorted((math.dist(c[0], c[1]), math.dist(c[1], c[2])))
        assert (axis.width, axis.length) == pytest.approx(sides, abs=1e-6)
        assert axis.ux >= 0  # drawn from the western end
        # the axis runs through the middle: every corner is at most half the width from it, at 0..length along it
        for x, y in pts:
            assert -1e-6 <= axis.along(x, y) <= axis.length + 1e-6
            assert abs(axis.across(x, y)) == pytest.approx(axis.width / 2, abs=1e-6)


def test_profile_and_vertical_exaggeration_by_hand() -> None:
    # two corners at each end of a 4 m trench fall on the same spot of the axis and are averaged
    got = profile([(0.0, 10.0), (0.0, 10.2), (4.0, 9.9), (4.01, 9.7)])
    assert [c for p in got for c in p] == pytest.approx([0.0, 10.1, 4.005, 9.8])
    assert vertical_exaggeration(4.0, 1.3) == 1  # a section as deep as it is long needs none
    assert vertical_exaggeration(10.0, 1.0) == 5  # 0.5 x 10 / 1 = 5
    assert vertical_exaggeration(30.0, 1.2) == 10  # 12.5 rounds down to 10
    assert vertical_exaggeration(8.0, 1.0) == 2.5  # 4 rounds down to 2.5


def test_stage_names_and_boundaries_of_the_chart() -> None:
    # International Chronostratigraphic Chart v2024-12 (ICS; stratigraphy.org/chart): Quaternary stages and their
    # bases in Ma - Chibanian 0.774 (near the Brunhes-Matuyama reversal), Calabrian 1.80, Gelasian 2.58 - from the
    # published chart; the Pliocene-Pleistocene boundary at 2.58 Ma since 2009 (Gibbard et al. 2010, from memory)
    stages = {u.name: (u.base_ma, u.top_ma) for u in CHART if u.rank == "Age"}
    assert stages["Gelasian"] == (2.58, 1.80) and stages["Calabrian"] == (1.80, 0.774)
    assert stages["Chibanian"] == (0.774, 0.129) and stages["Meghalayan"] == (0.0042, 0)
    assert unit_at(1935) == {"Age": "Gelasian", "Epoch": "Pleistocene", "Period": "Quaternary", "Era": "Cenozoic",
                             "Eon": "Phanerozoic"}
    assert unit_at(774)["Age"] == "Chibanian"  # a stage begins at its base (its GSSP)
    assert unit_at(5000)["Age"] == "Zanclean" and unit_at(5000)["Epoch"] == "Pliocene"
    assert unit_at(0)["Age"] == "Meghalayan"
    with pytest.raises(AgeOutsideChart, match="outside the Cenozoic"):
        unit_at(70_000)
    # the stages of each epoch tile it: consecutive, no gaps, except the chart's own 23.03 / 23.04 Ma Miocene base
    for epoch in {u.broader for u in CHART if u.rank == "Age"}:
        mine = sorted((u for u in CHART if u.broader == epoch), key=lambda u: u.top_ma)
        parent = next(u for u in CHART if u.name == epoch)
        assert mine[0].top_ma == parent.top_ma
        for young, old in zip(mine, mine[1:]):
            assert young.base_ma == old.top_ma
        assert mine[-1].base_ma == parent.base_ma or (epoch, mine[-1].base_ma) == ("Miocene", 23.03)
    terms = dwc_geological_terms(young_ka=10.0, old_ka=300.0)
    assert terms["earliestAgeOrLowestStage"] == "Chibanian" and terms["latestAgeOrHighestStage"] == "Greenlandian"
    assert terms["latestEpochOrHighestSeries"] == "Holocene" and terms["earliestEpochOrLowestSeries"] == "Pleistocene"
    assert dwc_geological_terms(None, None) == {}


@pytest.mark.parametrize(("recorded", "name", "qualifier", "rank"), [
    ("Mammalia indet.", "Mammalia", "indet.", "class"),
    ("Bovidae", "Bovidae", None, "family"),  # ICZN Art. 29.2: -idae is a family, -inae a subfamily, -ini a tribe
    ("Bovinae", "Bovinae", None, "subfamily"),
    ("Hominini", "Hominini", None, "tribe"),
    ("Hippopotamus amphibius", "Hippopotamus amphibius", None, "species"),
    ("Equus sp.", "Equus", "sp.", "genus"),
    ("Homo cf. erectus", "Homo erectus", "cf. erectus", "species"),  # open nomenclature (Bengtson 1988)
    ("Testudines", "Testudines", None, "order"),
    ("Notaname", "Notaname", None, None),  # a uninomial Baulk cannot place gets no rank rather than a guess
])
def test_identifications_split_into_their_terms(recorded: str, name: str, qualifier: str | None,
                                                rank: str | None) -> None:
    got = identification(recorded)
    assert (got["scientificName"], got["identificationQualifier"], got["taxonRank"]) == (name, qualifier, rank)
    assert got["verbatimIdentification"] == recorded


def test_meta_xml_names_every_column_by_its_published_iri() -> None:
    columns = [t for t, *_ in DWC_TERMS]
    root = ET.fromstring(meta_xml("occurrence.csv", columns))
    ns = {"t": "http://rs.tdwg.org/dwc/text/"}  # Darwin Core Text Guide namespace
    core = root.find("t:core", ns)
    assert core is not None and core.get("rowType") == "http://rs.tdwg.org/dwc/terms/Occurrence"
    fields = core.findall("t:field", ns)
    assert [f.get("term") for f in fields] == [TERM_IRIS[c] for c in columns]
    assert [int(f.get("index", -1)) for f in fields] == list(range(len(columns)))
    assert root.find("t:core/t:files/t:location", ns).text == "occurrence.csv"
