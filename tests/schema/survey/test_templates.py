"""Instrument line templates: the three record styles against hand-made lines, the angle units against their
definitions, round trips of every template (built-in, the README's examples, and templates Hypothesis makes up),
and reduced points against the polar reduction's worked example."""

from __future__ import annotations

import functools
import math
import operator
from fractions import Fraction
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from schema.errors import InstrumentLineInvalid, TemplateInvalid
from schema.survey import templates as tp
from schema.survey.polar import Station, reduce_shots
from schema.survey.templates import Observation, angle_from_text, angle_text, decode, encode

EXAMPLES = Path(__file__).resolve().parents[3] / "examples" / "instruments"
DELIMITED, FIXED, WORDS = (tp.load_template(EXAMPLES / f"{n}.toml") for n in ("delimited", "fixed", "words"))


def xor_hex(text: str) -> str:  # independent of the module: XOR of the bytes
    x = 0
    for b in text.encode("ascii"):
        x ^= b
    return f"{x:02X}"


def sum_hex(text: str) -> str:  # independent: the bytes' sum modulo 256
    return f"{sum(text.encode('ascii')) % 256:02X}"


# -- angle units against their definitions ---------------------------------------------------------------------
# Degree, minute and second of arc: 1' = (1/60) deg, 1" = (1/60)' (SI Brochure, 9th edition 2019, Table 8,
# non-SI units accepted for use with the SI). Gon: 1 gon = (pi/200) rad, so 100 gon = 90 deg (ISO 80000-3:2019,
# item 3-5.a, remark; from memory). NATO mil: 6400 to the circle, 1 mil = 0.05625 deg (STANAG 2934; from memory).
@pytest.mark.parametrize(("text", "unit", "degrees"), [
    ("123.4530", "dms", Fraction(123) + Fraction(45, 60) + Fraction(30, 3600)),
    ("123.45305", "dms", Fraction(123) + Fraction(45, 60) + Fraction(305, 36000)),
    ("0.0001", "dms", Fraction(1, 3600)),
    ("-2.3000", "dms", -Fraction(5, 2)),
    ("-0.0030", "dms", -Fraction(30, 3600)),
    ("12.3", "dms", Fraction(12) + Fraction(30, 60)),  # DDD.MMSS is a number: 12.3 is 12.30, 12 deg 30'
    ("359.5959", "dms", Fraction(360) - Fraction(1, 3600)),
    ("100", "gon", Fraction(90)),
    ("1", "gon", Fraction(9, 10)),
    ("400", "gon", Fraction(360)),
    ("1600", "mil", Fraction(90)),
    ("1", "mil", Fraction(5625, 100000)),
    ("6400", "mil", Fraction(360)),
    ("45.5", "deg", Fraction(91, 2)),
])
def test_angle_units_against_their_definitions(text: str, unit: str, degrees: Fraction) -> None:
    assert angle_from_text(text, unit) == pytest.approx(float(degrees), abs=1e-12)


def test_gon_and_mil_against_radians() -> None:
    # the same definitions in radians, through math.degrees (1 gon = pi/200 rad; 1 mil = 2 pi/6400 rad)
    for value in (0.0, 13.0, 123.4567, 399.9999):
        assert tp.to_degrees(value, "gon") == pytest.approx(math.degrees(value * math.pi / 200), abs=1e-12)
        assert tp.to_degrees(value * 16, "mil") == pytest.approx(math.degrees(value * 16 * 2 * math.pi / 6400), abs=1e-12)


@pytest.mark.parametrize(("degrees", "decimals", "wrap", "text"), [
    (123 + 45 / 60 + 30.5 / 3600, 5, True, "123.45305"),
    (123 + 45 / 60 + 30 / 3600, 4, True, "123.4530"),
    (10.99999999, 4, False, "11.0000"),  # 59.99996" carries into the minute and the degree
    (359.99999, 4, True, "0.0000"),  # a reading that rounds to a full turn is written 0
    (-2.5, 4, False, "-2.3000"),
    (-30 / 3600, 4, False, "-0.0030"),  # a negative angle under one degree keeps its sign
    (-0.00001, 4, False, "0.0000"),  # no "-0.0000"
    (5 + 5 / 3600, 6, False, "5.000500"),
])
def test_dms_packing(degrees: float, decimals: int, wrap: bool, text: str) -> None:
    assert angle_text(degrees, "dms", decimals, wrap=wrap) == text


@pytest.mark.parametrize(("text", "message"), [
    ("123.6100", "its minutes 61 are not below 60"),
    ("123.0560", "its seconds 60 are not below 60"),
    ("12..30", "not a number"),
    ("1e3", "not a number"),
])
def test_bad_dms_text(text: str, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        angle_from_text(text, "dms")


# -- the three record styles against hand-made lines -----------------------------------------------------------
def test_delimited_example_line() -> None:
    body = "1012;123.45305;-2.30000;12345;1.300;-30"
    line = f"{body}*{sum_hex(body)}"
    assert line == "1012;123.45305;-2.30000;12345;1.300;-30*B1"  # the line in examples/instruments/delimited.toml
    o = decode(DELIMITED, line).observation
    assert o.point == "1012" and o.angle_unit == "deg"
    assert o.hz == pytest.approx(123 + 45 / 60 + 30.5 / 3600, abs=1e-12)
    assert o.zenith == pytest.approx(92.5, abs=1e-12)  # a vertical angle of -2 deg 30' is zenith 92.5 deg
    assert (o.slope_distance_m, o.target_height_m, o.prism_constant_mm) == (12.345, 1.3, -30.0)


def test_fixed_example_line() -> None:
    body = "    1012  123.4567   91.2345   123456  1300"
    o = decode(FIXED, body + xor_hex(body)).observation
    assert (o.point, o.hz, o.zenith, o.angle_unit) == ("1012", 123.4567, 91.2345, "gon")
    assert (o.slope_distance_m, o.target_height_m, o.prism_constant_mm) == (12.3456, 1.3, 0.0)
    with pytest.raises(InstrumentLineInvalid) as exc:
        decode(FIXED, body + "00")
    assert str(exc.value) == (f"fixed-gon: the line {(body + '00')!r} has a wrong checksum ('00', expected "
                              f"{xor_hex(body)}); the line was garbled on the way: take the shot again")


def test_words_example_line_with_negative_sign_and_an_unknown_word() -> None:
    line = "PT00001012 HA+12345670 ZA+09123450 XX+99999999 SD+00123456 TH+00001300 PC-00000300\x03"
    o = decode(WORDS, line).observation
    assert (o.point, o.hz, o.zenith, o.angle_unit) == ("00001012", 123.4567, 91.2345, "gon")
    assert (o.slope_distance_m, o.target_height_m, o.prism_constant_mm) == (12.3456, 1.3, -30.0)
    assert tp.wire(WORDS, "PT1") == b"PT1\x03"


def test_words_dms_with_implied_point_and_negative_vertical_angle() -> None:
    t = tp.parse_template({
        "name": "w-dms", "style": "words", "implied_decimals": True, "angle_unit": "dms", "target_height_m": 0.0,
        "field": [{"what": "hz", "code": "HA", "decimals": 4}, {"what": "elevation", "code": "VA", "decimals": 4},
                  {"what": "horizontal_distance", "code": "HD", "decimals": 3}],
    })
    o = decode(t, "HA+3594530 VA-3000 HD+5000").observation
    assert o.hz == pytest.approx(359 + 45 / 60 + 30 / 3600, abs=1e-12)
    assert o.zenith == pytest.approx(90 + 30 / 60, abs=1e-12)  # -0 deg 30' 00"
    assert o.slope_distance_m == pytest.approx(5.0 / math.sin(math.radians(90.5)), abs=1e-12)


@pytest.mark.parametrize(("template", "line", "message"), [
    (tp.CSV, "F1,45,ninety,5,1.3", "csv: the zenith angle (column 3) is 'ninety': not a number (read as degrees); "
                                   "check the instrument's output format and the template's units, or take the shot again"),
    (tp.CSV, "F1,45,90,5", "csv: the target height (column 5) is missing: the line has 4 fields separated by ','; "
                           "check the instrument's output format"),
    (tp.CSV, "F1,-10,90,5,1.3", "csv: the horizontal reading (column 2) '-10' is outside one turn (0 to under 360 deg, "
                                "400 gon, 6400 mil); check the angle unit of the template and of the instrument"),
    (tp.CSV, "F1,10,90,0,1.3", "csv: the slope distance (column 4) '0' is not between 0 and 2000 m; check the "
                               "distance unit, or take the shot again"),
    (tp.CSV, "F1,10,90,5,-1.3", "csv: the target height (column 5) '-1.3' is not between 0 and 10 m; check the pole height"),
    (WORDS, "PT1 HA+12345670 SD+00123456 TH+00001300 PC-00000300",
     "words-gon: the zenith angle (the word with code 'ZA') is missing: no word of the line starts with 'ZA'; "
     "check the instrument's output format"),
    (WORDS, "PT1 HA+1234X670 ZA+09123450 SD+00123456 TH+00001300 PC-00000300",
     "words-gon: the horizontal reading (the word with code 'HA') is '+1234X670': not a number (read as gon)"),
    (FIXED, "    1012  123.4567   91.2345", "fixed-gon: the line"),  # too short: its last two characters are no checksum
    (tp.BKS, "XYZ,1,2", "bks: the line 'XYZ,1,2' does not hold 'BKS' at column 1, so it is not a line of this template"),
    (tp.BKS, "BKS,1,45,90,5,1.5,0,mil*2E", "bks: the line 'BKS,1,45,90,5,1.5,0,mil*2E' has a wrong checksum"),
    (tp.BKS, "BKS,1,45,90,5,1.5,0,deg", "bks: the line 'BKS,1,45,90,5,1.5,0,deg' has no checksum (no '*' before it)"),
])
def test_undecodable_lines_name_the_field(template: tp.Template, line: str, message: str) -> None:
    with pytest.raises(InstrumentLineInvalid) as exc:
        decode(template, line)
    assert str(exc.value).startswith(message)


def test_bks_reads_its_unit_from_the_line() -> None:
    body = "BKS,1,123.4567,91.2345,12.3456,1.300,-30,gon"
    o = decode(tp.BKS, f"{body}*{xor_hex(body)}").observation
    assert (o.hz, o.zenith, o.angle_unit, o.prism_constant_mm) == (123.4567, 91.2345, "gon", -30.0)
    body = "BKS,1,90.3000,90,5,1.5,0,dms"
    assert decode(tp.BKS, f"{body}*{xor_hex(body)}").observation.hz == pytest.approx(90.5)
    body = "BKS,1,45,90,5,1.5,0,rad"
    with pytest.raises(InstrumentLineInvalid, match="the angle unit \\(column 8\\) 'rad' is not deg, gon, dms or mil"):
        decode(tp.BKS, f"{body}*{xor_hex(body)}")


# -- template files ------------------------------------------------------------------------------------------
def _doc(**changes: object) -> dict[str, object]:
    doc: dict[str, object] = {"name": "t", "style": "delimited", "field": [
        {"what": "hz", "column": 1}, {"what": "zenith", "column": 2}, {"what": "slope_distance", "column": 3},
        {"what": "target_height", "column": 4}]}
    doc.update(changes)
    return doc


@pytest.mark.parametrize(("changes", "message"), [
    ({"colour": "red"}, "built-in: colour: is not a template key"),
    ({"style": "columns"}, "built-in: style: 'columns' is not a style; use delimited, fixed, words"),
    ({"angle_unit": "rad"}, "built-in: angle_unit: 'rad' is not known; use deg, gon, dms, mil"),
    ({"field": [{"what": "hz", "column": 1}]}, "built-in: field: no field holds the zenith angle or the vertical angle"),
    ({"field": [{"what": "hz", "column": 1}, {"what": "zenith", "column": 2}, {"what": "slope_distance", "column": 3}]},
     "built-in: target_height_m: no field holds the target height and none is fixed"),
    ({"field": [{"what": "hz", "column": 1, "unit": "dms", "decimals": 2}, {"what": "zenith", "column": 2},
                {"what": "slope_distance", "column": 3}, {"what": "target_height", "column": 4}]},
     "built-in: field 1 (hz) decimals: a DDD.MMSS angle needs at least 4 decimals (MMSS)"),
    ({"field": [{"what": "hz", "column": 1}, {"what": "zenith", "column": 2}, {"what": "slope_distance", "column": 3},
                {"what": "target_height", "column": 4}, {"what": "horizontal_distance", "column": 5}]},
     "built-in: field: give either a zenith or a vertical angle, and either a slope or a horizontal distance"),
    ({"field": [{"what": "azimuth", "column": 1}]}, "built-in: field 1 what: 'azimuth' is not known"),
    ({"checksum": {"kind": "crc"}}, "built-in: checksum kind: 'crc' is not known; use none, xor, sum"),
    ({"checksum": {"kind": "xor", "mark": 5}}, "built-in: checksum mark: 5 is not text in quotes"),
    ({"terminator": 3}, "built-in: terminator: 3 is not text in quotes"),
    ({"implied_decimals": "yes"}, "built-in: implied_decimals: 'yes' is not true or false"),
    ({"target_height_m": True}, "built-in: target_height_m: True is not a number"),
    ({"field": [{"what": "hz", "column": "1"}]}, "built-in: field 1 column: '1' is not a whole number"),
])
def test_bad_templates_are_refused_naming_the_key(changes: dict[str, object], message: str) -> None:
    with pytest.raises(TemplateInvalid) as exc:
        tp.parse_template(_doc(**changes))
    assert str(exc.value).startswith(message)


def test_overlapping_fixed_fields_and_a_bad_file(tmp_path: Path) -> None:
    with pytest.raises(TemplateInvalid, match=r"field 1 \(hz\): its characters overlap those of the zenith angle; check start and width"):
        tp.parse_template({"name": "f", "style": "fixed", "target_height_m": 0, "field": [
            {"what": "hz", "start": 1, "width": 10}, {"what": "zenith", "start": 5, "width": 10},
            {"what": "slope_distance", "start": 21, "width": 10}]})
    bad = tmp_path / "t.toml"
    bad.write_text('name = "x\nstyle = "fixed"\n')
    with pytest.raises(TemplateInvalid, match=f"{bad}: not valid TOML"):
        tp.load_template(bad)


# -- round trips ---------------------------------------------------------------------------------------------
def _tolerance(t: tp.Template, what: str, unit_in_line: str | None) -> float:
    """Half the last written digit of a field, in degrees or metres or mm (what rounding may lose)."""
    f = t.field(what)
    if f is None:
        return 0.0
    n = tp.places(t, f)
    unit = t.unit_of(f, unit_in_line)
    half = 0.5 * 10.0 ** -n
    if what in tp.ANGLE_FIELDS:
        return (half * 10_000 / 3600 if unit == "dms" else tp.to_degrees(half, unit)) + 1e-9
    if what == "prism_constant":
        return half * 1000 / tp.PER_METRE[unit] + 1e-9
    return half / tp.PER_METRE[unit] + 1e-9


def _assert_round_trip(t: tp.Template, o: Observation) -> None:
    line = encode(t, o)
    back = decode(t, line).observation
    unit_in_line = o.angle_unit if t.field("angle_unit") else None
    deg = lambda v, u: tp.to_degrees(v, u)  # noqa: E731
    hz_err = (deg(back.hz, back.angle_unit) - deg(o.hz, o.angle_unit) + 180) % 360 - 180
    vertical = "zenith" if t.field("zenith") else "elevation"
    assert abs(hz_err) <= _tolerance(t, "hz", unit_in_line), line
    zen_tol = _tolerance(t, vertical, unit_in_line)
    assert abs(deg(back.zenith, back.angle_unit) - deg(o.zenith, o.angle_unit)) <= zen_tol, line
    if t.field("slope_distance"):
        assert abs(back.slope_distance_m - o.slope_distance_m) <= _tolerance(t, "slope_distance", unit_in_line), line
    else:  # the slope distance comes back from the horizontal one over the sine of the (rounded) zenith angle
        z = math.radians(deg(o.zenith, o.angle_unit))
        tol = (_tolerance(t, "horizontal_distance", unit_in_line) / math.sin(z)
               + o.slope_distance_m * abs(math.cos(z) / math.sin(z)) * math.radians(zen_tol) * 1.01 + 1e-9)
        assert abs(back.slope_distance_m - o.slope_distance_m) <= tol, line
    if t.field("target_height"):
        assert abs(back.target_height_m - o.target_height_m) <= _tolerance(t, "target_height", unit_in_line), line
    if t.field("prism_constant"):
        assert abs(back.prism_constant_mm - o.prism_constant_mm) <= _tolerance(t, "prism_constant", unit_in_line), line
    if t.field("point"):
        assert back.point is not None and int(back.point) == int(o.point or "0"), line


@st.composite
def observations(draw: st.DrawFn, unit: str | None = None) -> Observation:
    unit = unit or draw(st.sampled_from(["deg", "gon"]))
    full = 360.0 if unit == "deg" else 400.0
    return Observation(
        hz=draw(st.floats(0, full, exclude_max=True)), zenith=draw(st.floats(full / 12, full * 5 / 12)),
        slope_distance_m=draw(st.floats(0.3, 1999.0)), target_height_m=draw(st.floats(0, 9.9)),
        prism_constant_mm=draw(st.floats(-99, 99)), angle_unit=unit,
        point=str(draw(st.integers(1, 99_999_999))),
    )


@pytest.mark.parametrize("template", [tp.BKS, tp.CSV, DELIMITED, FIXED, WORDS], ids=lambda t: t.name)
@settings(max_examples=150, deadline=None)
@given(o=observations())
def test_built_in_and_example_templates_round_trip(template: tp.Template, o: Observation) -> None:
    _assert_round_trip(template, o)


@st.composite
def templates(draw: st.DrawFn) -> tp.Template:
    """A made-up template: any style, units, vertical angle and distance kinds, decimals, order and checksum."""
    style = draw(st.sampled_from(tp.STYLES))
    angle_unit = draw(st.sampled_from(list(tp.ANGLE_UNITS)))
    distance_unit = draw(st.sampled_from(list(tp.DISTANCE_UNITS)))
    whats = ["point", "hz", draw(st.sampled_from(["zenith", "elevation"])),
             draw(st.sampled_from(["slope_distance", "horizontal_distance"]))]
    whats += [w for w in ("target_height", "prism_constant") if draw(st.booleans())]
    order = draw(st.permutations(whats))
    fields = []
    for i, what in enumerate(order, start=1):
        f: dict[str, object] = {}
        if what in tp.ANGLE_FIELDS:
            unit = draw(st.sampled_from([None, *tp.ANGLE_UNITS]))
            f["unit"] = unit
            f["decimals"] = draw(st.integers(4 if (unit or angle_unit) == "dms" else 2, 7))
        elif what != "point":
            unit = draw(st.sampled_from([None, *tp.DISTANCE_UNITS]))
            f["unit"] = unit
            low, high = {"m": (2, 5), "mm": (0, 2), "0.1mm": (0, 1)}[unit or distance_unit]  # 1 cm or finer
            f["decimals"] = draw(st.integers(low, high))
        f = {k: v for k, v in f.items() if v is not None}
        where = {"delimited": {"column": i}, "fixed": {"start": (i - 1) * 16 + 1, "width": 16},
                 "words": {"code": "ABCDEFGH"[i - 1] + "Q"}}[style]
        fields.append({"what": what, **f, **where})
    kind = draw(st.sampled_from(tp.CHECKSUMS))
    checksum = {"kind": kind, **({"mark": "*"} if kind != "none" and draw(st.booleans()) else {})}
    doc = {"name": "made-up", "style": style, "angle_unit": angle_unit, "field": fields, "checksum": checksum,
           "distance_unit": distance_unit,
           "implied_decimals": style != "delimited" and draw(st.booleans())}
    if "target_height" not in whats:
        doc["target_height_m"] = 1.5
    return tp.parse_template(doc)


@settings(max_examples=300, deadline=None)
@given(t=templates(), data=st.data())
def test_any_template_round_trips(t: tp.Template, data: st.DataObject) -> None:
    o = data.draw(observations())
    if not t.field("target_height"):
        o = Observation(o.hz, o.zenith, o.slope_distance_m, 1.5, o.prism_constant_mm, o.angle_unit, o.point)
    if not t.field("prism_constant"):
        o = Observation(o.hz, o.zenith, o.slope_distance_m, o.target_height_m, 0.0, o.angle_unit, o.point)
    _assert_round_trip(t, o)


# -- reduced points: the polar reduction's worked example -------------------------------------------------------
def test_decoded_dms_line_reduces_to_the_345_triangle() -> None:
    # tests/schema/survey/test_polar.py: a target 3 m east and 4 m north of a station at (100, 200, 50) with a
    # level sight of 5 m reduces to (103, 204, 50). atan(3/4) = 36.8698976 deg = 36 deg 52' 11.63" (by hand).
    body = "F7;36.521163;0.000000;5000;1.500;0"
    t = tp.parse_template({**tp_doc(DELIMITED), "field": [
        {"what": "point", "column": 1}, {"what": "hz", "column": 2, "decimals": 6},
        {"what": "elevation", "column": 3, "decimals": 6}, {"what": "slope_distance", "column": 4, "unit": "mm"},
        {"what": "target_height", "column": 5}, {"what": "prism_constant", "column": 6}]})
    o = decode(t, f"{body}*{sum_hex(body)}").observation
    r = reduce_shots(Station(100.0, 200.0, 50.0, 1.5, 0.0), o.hz, o.zenith, o.slope_distance_m, o.target_height_m,
                     o.prism_constant_mm)
    # 0.005" of arc at 5 m is 0.1 micrometre
    assert (r.e[0], r.n[0], r.z[0]) == pytest.approx((103.0, 204.0, 50.0), abs=1e-6)


def tp_doc(t: tp.Template) -> dict[str, object]:
    """The top-level keys of a loaded template, to vary its fields in a test."""
    return {"name": t.name, "style": t.style, "separator": t.separator, "angle_unit": t.angle_unit,
            "checksum": {"kind": t.checksum, "mark": t.checksum_mark}}


def test_checksums_match_an_independent_computation() -> None:
    for text in ("BKS,1,45.0000,90.0000,5.0000,1.500,0,deg", "", "a;b;c"):
        assert tp.checksum("xor", text) == xor_hex(text)
        assert tp.checksum("sum", text) == sum_hex(text)
    assert functools.reduce(operator.xor, b"BKS,1,45.0000,90.0000,5.0000,1.500,0,deg") == 0x28  # README's example


@pytest.mark.parametrize("template", [tp.BKS, tp.CSV, DELIMITED, FIXED, WORDS], ids=lambda t: t.name)
@settings(max_examples=300, deadline=None)
@given(line=st.one_of(st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126), max_size=80),
                      st.lists(st.sampled_from(["+", "-", ".", "0", "5", "9", ";", ",", " ", "*", "PT", "HA", "ZA",
                                                "SD", "TH", "PC", "BKS", "deg", "gon", "dms"]), max_size=40).map("".join)))
def test_any_line_is_read_or_refused_never_crashes(template: tp.Template, line: str) -> None:
    try:
        o = decode(template, line).observation
    except InstrumentLineInvalid as exc:
        assert str(exc).startswith(f"{template.name}: ")
    else:  # whatever was read is a shot Baulk can keep
        assert 0 <= tp.to_degrees(o.hz, o.angle_unit) < 360 and 0 < o.slope_distance_m <= tp.MAX_DISTANCE_M


def test_readme_shows_the_delimited_example_as_it_is() -> None:
    readme = (EXAMPLES.parents[1] / "README.md").read_text()
    assert "```toml\n" + (EXAMPLES / "delimited.toml").read_text() + "```" in readme


def test_fixed_fields_left_aligned_and_trimmed_at_the_line_end() -> None:
    t = tp.parse_template({"name": "f", "style": "fixed", "field": [
        {"what": "hz", "start": 1, "width": 10}, {"what": "zenith", "start": 11, "width": 10},
        {"what": "slope_distance", "start": 21, "width": 10}, {"what": "target_height", "start": 31, "width": 8}]})
    o = decode(t, "45.0      90.0      5.0       1.3").observation  # the last field's padding was trimmed
    assert (o.hz, o.zenith, o.slope_distance_m, o.target_height_m) == (45.0, 90.0, 5.0, 1.3)
    with pytest.raises(InstrumentLineInvalid, match=r"f: the target height \(characters 31-38\) is missing: the line "
                                                    "has only 23 characters"):
        decode(t, "45.0      90.0      5.0")
