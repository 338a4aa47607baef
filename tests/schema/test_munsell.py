"""Munsell notation. Valid examples are colours printed in the USDA Soil Survey Manual (Handbook 18, 2017),
chapter 3, and on the standard soil colour chart pages (10YR, 2.5Y, 5Y, the gley pages); recalled from memory."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from schema.munsell import HUE_FAMILIES, MunsellError, parse_munsell


@pytest.mark.parametrize(
    ("text", "canonical"),
    [
        ("10YR 5/3", "10YR 5/3"),
        ("2.5Y 7/2", "2.5Y 7/2"),
        ("5YR 4/6", "5YR 4/6"),
        ("7.5YR 3/2", "7.5YR 3/2"),
        ("5GY 6/1", "5GY 6/1"),     # gley page 1
        ("10BG 5/1", "10BG 5/1"),   # gley page 2
        ("N 5/", "N 5/"),
        ("N 2.5/0", "N 2.5/"),
        ("10yr 5 / 3", "10YR 5/3"),
        (" 2.5Y 8/1 ", "2.5Y 8/1"),
    ],
)
def test_valid_notation_is_canonicalised(text: str, canonical: str) -> None:
    assert str(parse_munsell(text)) == canonical


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("10YR 5-3", "'10YR 5-3' is not Munsell notation; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("brown", "'brown' is not Munsell notation; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("12YR 5/3", "hue step 12 in '12YR 5/3' is outside (0, 10]; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("0YR 5/3", "hue step 0 in '0YR 5/3' is outside (0, 10]; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("10YR 11/3", "value 11 in '10YR 11/3' is outside 0-10; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("10YR 5/", "'10YR 5/' has a hue but no chroma; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
        ("N 5/2", "neutral colour 'N 5/2' cannot have chroma 2; write N 5/"),
        ("10XR 5/3", "'10XR 5/3' is not Munsell notation; write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"),
    ],
)
def test_invalid_notation_names_the_fix(text: str, message: str) -> None:
    with pytest.raises(MunsellError) as exc:
        parse_munsell(text)
    assert str(exc.value) == message


@given(
    step=st.sampled_from([1.25, 2.5, 5, 7.5, 10]),
    family=st.sampled_from(HUE_FAMILIES),
    value=st.sampled_from([2, 2.5, 3, 4, 5, 6, 7, 8, 8.5]),
    chroma=st.integers(0, 8),
)
def test_round_trip(step: float, family: str, value: float, chroma: int) -> None:
    colour = parse_munsell(f"{step:g}{family} {value:g}/{chroma}")
    assert parse_munsell(str(colour)) == colour
    assert colour.hue_family == family and colour.value == value and colour.chroma == chroma
