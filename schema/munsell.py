"""Munsell colour notation for soil and sediment descriptions.

Notation ``HUE VALUE/CHROMA``, e.g. ``10YR 5/3``; neutral colours have no hue letter and no chroma, ``N 5/``
(``N 5/0`` is accepted and written back as ``N 5/``). Hue is a number in (0, 10] followed by one of the ten
Munsell hue families. Source: Munsell notation as used in the USDA Soil Survey Manual (Handbook 18, 2017),
chapter 3, "Soil Color"; the ranges below are written from memory of that text.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = ["HUE_FAMILIES", "MunsellColour", "MunsellError", "parse_munsell"]

HUE_FAMILIES = ("R", "YR", "Y", "GY", "G", "BG", "B", "PB", "P", "RP")

_PATTERN = re.compile(
    r"^\s*(?:(?P<step>\d+(?:\.\d+)?)\s*(?P<family>YR|GY|BG|PB|RP|R|Y|G|B|P)|(?P<neutral>N))"
    r"\s+(?P<value>\d+(?:\.\d+)?)\s*/\s*(?P<chroma>\d+(?:\.\d+)?)?\s*$",
    re.IGNORECASE,
)

_EXAMPLE = "write hue value/chroma, e.g. 10YR 5/3 (neutral greys: N 5/)"


class MunsellError(ValueError):
    """A string that is not valid Munsell notation."""


@dataclass(frozen=True)
class MunsellColour:
    """A parsed Munsell colour; ``str()`` gives the canonical notation."""

    hue_step: float | None
    hue_family: str | None
    value: float
    chroma: float | None

    @property
    def is_neutral(self) -> bool:
        return self.hue_family is None

    def __str__(self) -> str:
        if self.is_neutral:
            return f"N {_num(self.value)}/"
        return f"{_num(self.hue_step)}{self.hue_family} {_num(self.value)}/{_num(self.chroma)}"


def _num(x: float | None) -> str:
    assert x is not None
    return f"{x:g}"


def parse_munsell(text: str) -> MunsellColour:
    """Parse Munsell notation or raise ``MunsellError`` naming the problem and the fix."""
    m = _PATTERN.match(text)
    if not m:
        raise MunsellError(f"{text!r} is not Munsell notation; {_EXAMPLE}")
    value = float(m["value"])
    if not 0 <= value <= 10:
        raise MunsellError(f"value {value:g} in {text!r} is outside 0-10; {_EXAMPLE}")
    chroma = float(m["chroma"]) if m["chroma"] is not None else None
    if m["neutral"]:
        if chroma not in (None, 0.0):
            raise MunsellError(f"neutral colour {text!r} cannot have chroma {chroma:g}; write N {value:g}/")
        return MunsellColour(None, None, value, None)
    step = float(m["step"])
    if not 0 < step <= 10:
        raise MunsellError(f"hue step {step:g} in {text!r} is outside (0, 10]; {_EXAMPLE}")
    if chroma is None:
        raise MunsellError(f"{text!r} has a hue but no chroma; {_EXAMPLE}")
    if chroma > 30:
        raise MunsellError(f"chroma {chroma:g} in {text!r} is beyond any soil colour (0-30); {_EXAMPLE}")
    return MunsellColour(step, m["family"].upper(), value, chroma)
