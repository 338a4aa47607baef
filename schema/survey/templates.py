"""Instrument line templates: what a total station (or its logger) sends per shot, described in a small file the
user keeps, and the pure functions that read a line through a template (``decode``) and write one (``encode``).

A template is one of three record styles (see README.md, "Instrument line templates", for worked examples):

- ``delimited``: fields between a separator character; each field is found by its ``column`` (1 = first);
- ``fixed``: fields at fixed character positions; each by ``start`` (1 = first character) and ``width``;
- ``words``: words between a separator, each word a code of ``code_width`` characters (which says what the word
  holds), ``gap`` characters that are skipped, then a signed value; each field by its ``code``.

A field says ``what`` it holds (``point``, ``hz``, ``zenith`` or ``elevation``, ``slope_distance`` or
``horizontal_distance``, ``target_height``, ``prism_constant``, ``angle_unit`` (the line names its own unit), or
``text``: a fixed text the line must hold, such as a record tag) and its unit; numbers may carry a sign and are
written with a decimal point or, with ``implied_decimals``, without one (the last ``decimals`` digits are the
decimals). Angle units: ``deg``, ``gon`` (400 to the circle), ``dms`` (degrees, minutes and seconds packed as
DDD.MMSS, further digits being decimals of a second) and ``mil`` (the NATO mil, 6400 to the circle); distance
units: ``m``, ``mm`` and ``0.1mm``. A line may end with a checksum (two hex digits: the XOR, or the sum modulo
256, of the characters it covers) after a mark such as ``*``.

``decode`` never guesses: a line that does not fit its template raises ``InstrumentLineInvalid`` naming the
template, the field (its ``what`` and where it is) and the text found. The angles of a decoded line are given in
``gon`` when every angle field of the template is in gon, else in degrees (the two units a setup uses).

Two templates are built in: ``bks`` (Baulk's own shot line, see ``mobile/instruments.py``) and ``csv`` (a plain
comma-separated line: ``point,hz,zenith,slope distance,target height`` in degrees and metres).
"""

from __future__ import annotations

import functools
import math
import operator
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ..errors import InstrumentLineInvalid, TemplateInvalid

__all__ = [
    "ANGLE_UNITS", "BUILT_IN", "DISTANCE_UNITS", "Decoded", "Field", "Observation", "Template", "angle_from_text",
    "angle_text", "checksum", "decode", "encode", "from_degrees", "load_template", "parse_template", "places",
    "template_document", "template_named", "to_degrees", "wire",
]

# Angle units and their full circle. deg: 360; gon: 400 (ISO 80000-3, "gon"); mil: 6400 (the NATO mil,
# STANAG 2934: 1 mil = 360/6400 deg); dms: degrees, minutes, seconds (60 minutes to the degree, 60 seconds to the
# minute) packed into one number DDD.MMSS.
ANGLE_UNITS: dict[str, float] = {"deg": 360.0, "gon": 400.0, "dms": 360.0, "mil": 6400.0}
# Distance units, in metres.
DISTANCE_UNITS: dict[str, float] = {"m": 1.0, "mm": 0.001, "0.1mm": 0.0001}
PER_METRE: dict[str, int] = {"m": 1, "mm": 1000, "0.1mm": 10000}  # divide by these: 123456 / 10000 is 12.3456
UNIT_WORDS = {"deg": "degrees", "gon": "gon", "dms": "DDD.MMSS", "mil": "mil", "m": "metres", "mm": "millimetres",
              "0.1mm": "tenths of a millimetre"}
WHATS = ("point", "hz", "zenith", "elevation", "slope_distance", "horizontal_distance", "target_height",
         "prism_constant", "angle_unit", "text")
ANGLE_FIELDS = ("hz", "zenith", "elevation")
LENGTH_FIELDS = ("slope_distance", "horizontal_distance", "target_height")
STYLES = ("delimited", "fixed", "words")
TERMINATORS = {"CRLF": "\r\n", "CR": "\r", "LF": "\n", "ETX": "\x03"}
CHECKSUMS = ("none", "xor", "sum")
# what each field is called in a message
LABEL = {
    "point": "point id", "hz": "horizontal reading", "zenith": "zenith angle", "elevation": "vertical angle",
    "slope_distance": "slope distance", "horizontal_distance": "horizontal distance",
    "target_height": "target height", "prism_constant": "prism constant", "angle_unit": "angle unit", "text": "text",
}
MAX_DISTANCE_M = 2000.0  # no trench shot is longer; a longer one is a misread line
MAX_TARGET_M = 10.0
MAX_PRISM_MM = 100.0


@dataclass(frozen=True)
class Field:
    """One field of a template: what it holds, where it is in the line, and how its value is written."""

    what: str
    column: int | None = None  # delimited: 1 = first
    start: int | None = None  # fixed: 1 = first character
    width: int | None = None  # fixed
    code: str | None = None  # words
    unit: str | None = None  # angle or distance unit of this field (else the template's)
    decimals: int | None = None  # places written (dms: 4 = MMSS, 5 = MMSS plus tenths of a second)
    implied_decimals: bool | None = None  # the point is not written: the last ``decimals`` digits are decimals
    digits: int | None = None  # words: the value's digits, zero-padded (without the sign)
    equals: str | None = None  # text: what the line must hold here

    def where(self) -> str:
        if self.column is not None:
            return f"column {self.column}"
        if self.start is not None:
            return f"characters {self.start}-{self.start + (self.width or 1) - 1}"
        return f"the word with code {self.code!r}"

    def label(self) -> str:
        return f"{LABEL[self.what]} ({self.where()})"


@dataclass(frozen=True)
class Template:
    """A record style and its fields (see the module docstring); ``check_template`` has made sure it is whole."""

    name: str
    style: str
    fields: tuple[Field, ...]
    separator: str = ","
    terminator: str = "CRLF"
    angle_unit: str = "deg"
    distance_unit: str = "m"
    code_width: int = 2
    gap: int = 0
    implied_decimals: bool = False
    target_height_m: float | None = None  # when no field carries the target height
    prism_constant_mm: float = 0.0  # when no field carries it (0: the instrument applies it)
    checksum: str = "none"
    checksum_mark: str | None = None  # the checksum follows this mark; none: the line's last two characters
    checksum_from: int = 1  # the first character the checksum covers (1 = the line's first)
    source: str = "built-in"

    def field(self, what: str) -> Field | None:
        return next((f for f in self.fields if f.what == what), None)

    def unit_of(self, f: Field, unit_in_line: str | None = None) -> str:
        if f.unit is not None:
            return f.unit
        if f.what in ANGLE_FIELDS:
            return unit_in_line or self.angle_unit
        return self.distance_unit if f.what in LENGTH_FIELDS else "mm"

    def output_unit(self) -> str:
        """The unit of decoded angles: gon when every angle field is in gon, else deg."""
        if self.field("angle_unit") is not None:
            return "line"  # decided per line
        units = {self.unit_of(f) for f in self.fields if f.what in ANGLE_FIELDS}
        return "gon" if units == {"gon"} else "deg"

    def describe(self) -> str:
        return f"{self.name} ({self.style}, {self.source})"


@dataclass(frozen=True)
class Observation:
    """A shot's values as Baulk keeps them: angles in ``angle_unit`` (deg or gon), distances in metres."""

    hz: float
    zenith: float
    slope_distance_m: float
    target_height_m: float
    prism_constant_mm: float = 0.0
    angle_unit: str = "deg"
    point: str | None = None


@dataclass(frozen=True)
class Decoded:
    """A line read through a template: the observation, and each field as (label, text in the line, value)."""

    template: str
    raw: str
    observation: Observation
    shown: tuple[tuple[str, str, str], ...] = field(default=())

    def describe(self) -> str:
        """One line for the screen: what the line was read as, in the units Baulk keeps."""
        o = self.observation
        u = o.angle_unit
        return (f"point {o.point or '-'}, hz {o.hz:.4f} {u}, zenith {o.zenith:.4f} {u}, slope distance "
                f"{o.slope_distance_m:.4f} m, target height {o.target_height_m:.3f} m, prism constant "
                f"{o.prism_constant_mm:g} mm")


# -- angle and distance units ---------------------------------------------------------------------------------
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)$")


def _dms_degrees(text: str) -> float:
    """Degrees from packed DDD.MMSS text (sign allowed; digits after SS are decimals of a second)."""
    sign = -1.0 if text.startswith("-") else 1.0
    body = text.lstrip("+-")
    whole, _dot, frac = body.partition(".")
    frac = (frac + "0000")
    minutes, seconds = int(frac[:2]), float(frac[2:4] + "." + (frac[4:] or "0"))
    if minutes >= 60:
        raise ValueError(f"its minutes {frac[:2]} are not below 60")
    if seconds >= 60:
        raise ValueError(f"its seconds {frac[2:4]} are not below 60")
    return sign * (int(whole or "0") + minutes / 60 + seconds / 3600)


def angle_from_text(text: str, unit: str) -> float:
    """Degrees from an angle written in ``unit`` (``ValueError`` saying why the text is not one)."""
    if not _NUMBER.match(text):
        raise ValueError("not a number")
    if unit == "dms":
        return _dms_degrees(text)
    return to_degrees(float(text), unit)


def to_degrees(value: float, unit: str) -> float:
    """Degrees from a value in deg, gon or mil (not dms: that is text, see ``angle_from_text``)."""
    return value * 360.0 / ANGLE_UNITS[unit]


def from_degrees(value: float, unit: str) -> float:
    return value * ANGLE_UNITS[unit] / 360.0


def angle_text(degrees: float, unit: str, decimals: int, *, wrap: bool) -> str:
    """``degrees`` written in ``unit`` with ``decimals`` places (dms: 4 = DDD.MMSS); ``wrap`` keeps a rounded
    reading inside one turn (a reading that rounds to 360 deg is written 0)."""
    if unit == "dms":
        step = 10.0 ** -(decimals - 4)  # of a second
        sign = "-" if degrees < 0 else ""
        total = round(abs(degrees) * 3600 / step)  # in steps
        if wrap:
            total %= round(360 * 3600 / step)
        per_minute, per_degree = round(60 / step), round(3600 / step)
        d, rest = divmod(total, per_degree)
        m, s = divmod(rest, per_minute)
        sec = f"{s * step:0{3 + decimals - 4 if decimals > 4 else 2}.{decimals - 4}f}" if decimals > 4 else f"{s:02d}"
        if sign and total == 0:
            sign = ""
        return f"{sign}{d}.{m:02d}{sec.replace('.', '')}"
    value = round(from_degrees(degrees, unit), decimals)
    if wrap and value >= ANGLE_UNITS[unit]:
        value -= ANGLE_UNITS[unit]
    if value == 0:
        value = 0.0  # no "-0.0000"
    return f"{value:.{decimals}f}"


# -- checksums ------------------------------------------------------------------------------------------------
def checksum(kind: str, text: str) -> str:
    """Two hex digits: the XOR of the characters' codes, or their sum modulo 256."""
    codes = [ord(c) for c in text]
    value = functools.reduce(operator.xor, codes, 0) if kind == "xor" else sum(codes) % 256
    return f"{value:02X}"


def _split_checksum(t: Template, line: str) -> str:
    """The line without its checksum, once the checksum is found right; else ``InstrumentLineInvalid``."""
    if t.checksum == "none":
        return line
    if t.checksum_mark:
        body, mark, given = line.rpartition(t.checksum_mark)
        if not mark:
            raise InstrumentLineInvalid(f"{t.name}: the line {line[:40]!r} has no checksum (no {t.checksum_mark!r} "
                                        "before it); check the instrument's output format, or take the shot again")
    else:
        body, given = line[:-2], line[-2:]
    expected = checksum(t.checksum, body[t.checksum_from - 1:])
    if given.strip().upper() != expected:
        raise InstrumentLineInvalid(f"{t.name}: the line {line[:60]!r} has a wrong checksum ({given.strip()!r}, "
                                    f"expected {expected}); the line was garbled on the way: take the shot again")
    return body


# -- reading a line -------------------------------------------------------------------------------------------
def _pieces(t: Template, body: str) -> dict[Field, str]:
    """The text of each field in the line (``InstrumentLineInvalid`` for one that is not there)."""
    out: dict[Field, str] = {}
    if t.style == "delimited":
        parts = body.split(t.separator)
        for f in t.fields:
            assert f.column is not None
            if f.column > len(parts):
                raise InstrumentLineInvalid(f"{t.name}: the {f.label()} is missing: the line has {len(parts)} fields "
                                            f"separated by {t.separator!r}; check the instrument's output format")
            out[f] = parts[f.column - 1].strip()
    elif t.style == "fixed":
        for f in t.fields:
            assert f.start is not None and f.width is not None
            if len(body) < f.start:  # a field cut short at the line's end is read as far as it goes (trailing
                # spaces are often trimmed on the way)
                raise InstrumentLineInvalid(f"{t.name}: the {f.label()} is missing: the line has only {len(body)} "
                                            "characters; check the instrument's output format")
            out[f] = body[f.start - 1:f.start - 1 + f.width].strip()
    else:
        words: dict[str, str] = {}
        for word in (w for w in body.split(t.separator) if w.strip()):
            word = word.strip()
            words.setdefault(word[:t.code_width], word[t.code_width + t.gap:])
        for f in t.fields:
            if f.code not in words:
                raise InstrumentLineInvalid(f"{t.name}: the {f.label()} is missing: no word of the line starts with "
                                            f"{f.code!r}; check the instrument's output format")
            out[f] = words[f.code]  # type: ignore[index]
    return out


def _number_text(t: Template, f: Field, text: str) -> str:
    """The value's text with its decimal point where the template implies one."""
    implied = t.implied_decimals if f.implied_decimals is None else f.implied_decimals
    if not implied or "." in text:
        return text
    n_places = places(t, f)
    sign = text[0] if text[:1] in "+-" else ""
    digits = text.lstrip("+-")
    if not digits.isdigit():
        return text  # refused by the caller, naming the field
    digits = digits.rjust(n_places + 1, "0")
    return f"{sign}{digits[:-n_places] if n_places else digits}.{digits[-n_places:] if n_places else '0'}"


def places(t: Template, f: Field) -> int:
    """How many decimals field ``f`` is written with (its ``decimals``, else the usual for its unit)."""
    if f.decimals is not None:
        return f.decimals
    unit = t.unit_of(f)
    if f.what in ANGLE_FIELDS:
        return 4 if unit in ("deg", "gon", "dms") else 2
    if f.what == "prism_constant":
        return 1
    return {"m": 4, "mm": 0, "0.1mm": 0}[unit] if f.what in ("slope_distance", "horizontal_distance") else \
        {"m": 3, "mm": 0, "0.1mm": 0}[unit]


def _check_tags(t: Template, raw: str) -> None:
    """A line whose fixed texts (record tags) are not the template's is another kind of line: said first."""
    tags = [f for f in t.fields if f.what == "text"]
    if not tags:
        return
    body = raw.rpartition(t.checksum_mark)[0] or raw if t.checksum != "none" and t.checksum_mark else raw
    try:
        texts = _pieces(replace(t, fields=tuple(tags)), body)
    except InstrumentLineInvalid:
        texts = {}
    for f in tags:
        if texts.get(f) != f.equals:
            raise InstrumentLineInvalid(f"{t.name}: the line {raw[:40]!r} does not hold {f.equals!r} at {f.where()}, so "
                                        "it is not a line of this template; check the instrument's output format, or "
                                        "choose the template it sends")


def decode(t: Template, line: str) -> Decoded:
    """A line read through template ``t``; ``InstrumentLineInvalid`` names the field that failed and why."""
    raw = line.strip("\r\n\x03")
    if t.style != "fixed":  # a fixed-width line keeps its leading spaces: they place the fields
        raw = raw.strip()
    _check_tags(t, raw)
    body = _split_checksum(t, raw)
    texts = _pieces(t, body)
    unit_in_line = None
    for f, text in texts.items():
        if f.what == "angle_unit":
            if text not in ("deg", "gon", "dms", "mil"):
                raise InstrumentLineInvalid(f"{t.name}: the {f.label()} {text!r} is not deg, gon, dms or mil; set the "
                                            "instrument's angle unit")
            unit_in_line = text
    values: dict[str, float] = {}  # angles in degrees, lengths in metres, the prism constant in mm
    native: dict[str, tuple[float, str]] = {}  # angles as written, with their unit (gon kept exact)
    shown: list[tuple[str, str, str]] = []
    point = None
    for f, text in texts.items():
        if f.what in ("text", "angle_unit"):
            continue
        if f.what == "point":
            point = text.lstrip("+") or None
            shown.append((f.what, text, point or "-"))
            continue
        unit = t.unit_of(f, unit_in_line)
        value_text = _number_text(t, f, text)
        try:
            if not _NUMBER.match(value_text):
                raise ValueError("not a number")
            if f.what in ANGLE_FIELDS:
                values[f.what] = angle_from_text(value_text, unit)
                native[f.what] = (float(value_text), unit)
            elif f.what == "prism_constant":
                values[f.what] = float(value_text) * 1000 / PER_METRE[unit]
            else:
                values[f.what] = float(value_text) / PER_METRE[unit]
        except ValueError as exc:
            raise InstrumentLineInvalid(f"{t.name}: the {f.label()} is {text!r}: {exc} (read as {UNIT_WORDS[unit]}); "
                                        "check the instrument's output format and the template's units, or take "
                                        "the shot again") from None
        shown.append((f.what, text, f"{values[f.what]:.6g}"))
    return Decoded(t.name, raw, _observation(t, values, native, point, unit_in_line, texts), tuple(shown))


def _observation(t: Template, v: dict[str, float], native: dict[str, tuple[float, str]], point: str | None,
                 unit_in_line: str | None, texts: dict[Field, str]) -> Observation:
    def bad(what: str, message: str, fix: str) -> InstrumentLineInvalid:
        f = t.field(what)
        if f is None:  # a value the template fixes, or one computed from others
            return InstrumentLineInvalid(f"{t.name}: the {LABEL[what]} {message}; {fix}")
        return InstrumentLineInvalid(f"{t.name}: the {f.label()} {texts[f]!r} {message}; {fix}")

    hz = v["hz"]
    if not 0 <= hz < 360:
        raise bad("hz", "is outside one turn (0 to under 360 deg, 400 gon, 6400 mil)",
                  "check the angle unit of the template and of the instrument")
    if "zenith" in v:
        zenith = v["zenith"]
        if not 0 < zenith < 360:
            raise bad("zenith", "is outside 0-360 deg (0 is straight up)", "re-read the vertical circle")
    else:
        if not -90 < v["elevation"] < 90:
            raise bad("elevation", "is outside -90 to +90 deg (0 is level)", "re-read the vertical circle")
        zenith = 90.0 - v["elevation"]
    name = "slope_distance" if "slope_distance" in v else "horizontal_distance"
    if not 0 < v[name] <= MAX_DISTANCE_M:
        raise bad(name, f"is not between 0 and {MAX_DISTANCE_M:g} m", "check the distance unit, or take the shot again")
    sd = v[name] if name == "slope_distance" else v[name] / math.sin(math.radians(zenith))
    th = v.get("target_height", t.target_height_m)
    assert th is not None  # check_template refuses a template with neither
    if not 0 <= th < MAX_TARGET_M:
        raise bad("target_height", f"is not between 0 and {MAX_TARGET_M:g} m", "check the pole height")
    pc = v.get("prism_constant", t.prism_constant_mm)
    if not -MAX_PRISM_MM <= pc <= MAX_PRISM_MM:
        raise bad("prism_constant", f"is not between -{MAX_PRISM_MM:g} and {MAX_PRISM_MM:g} mm",
                  "check the prism constant's unit")
    unit = t.output_unit()
    if unit == "line":
        unit = "gon" if unit_in_line == "gon" else "deg"
    out = {"hz": hz, "zenith": zenith}
    for what in out:
        value, written = native.get(what, (math.nan, ""))
        # an angle written in the output unit is kept as written (no round trip through degrees)
        out[what] = value if written == unit else from_degrees(out[what], unit)
    return Observation(out["hz"], out["zenith"], sd, th, pc, unit, point)


# -- writing a line -------------------------------------------------------------------------------------------
def encode(t: Template, o: Observation) -> str:
    """The line template ``t`` gives for observation ``o`` (without the line's terminator; see ``wire``)."""
    zen_deg = to_degrees(o.zenith, o.angle_unit)
    unit_in_line = o.angle_unit if t.field("angle_unit") is not None else None
    degrees = {"hz": to_degrees(o.hz, o.angle_unit), "zenith": zen_deg, "elevation": 90.0 - zen_deg}
    metres = {"slope_distance": o.slope_distance_m,
              "horizontal_distance": o.slope_distance_m * math.sin(math.radians(zen_deg)),
              "target_height": o.target_height_m}
    texts: dict[Field, str] = {}
    for f in t.fields:
        unit = t.unit_of(f, unit_in_line)
        n_places = places(t, f)
        if f.what == "text":
            text = f.equals or ""
        elif f.what == "angle_unit":
            text = o.angle_unit
        elif f.what == "point":
            text = o.point or ""
        elif f.what in ANGLE_FIELDS:
            text = angle_text(degrees[f.what], unit, n_places, wrap=f.what == "hz")
        elif f.what == "prism_constant":
            text = f"{o.prism_constant_mm * PER_METRE[unit] / 1000:.{n_places}f}"
        else:
            text = f"{metres[f.what] * PER_METRE[unit]:.{n_places}f}"
        texts[f] = _written(t, f, text)
    body = _assemble(t, texts)
    if t.checksum == "none":
        return body
    return f"{body}{t.checksum_mark or ''}{checksum(t.checksum, body[t.checksum_from - 1:])}"


def _written(t: Template, f: Field, text: str) -> str:
    implied = t.implied_decimals if f.implied_decimals is None else f.implied_decimals
    if f.what in ("text", "angle_unit"):
        return text
    sign = "-" if text.startswith("-") else ("+" if t.style == "words" else "")
    digits = text.lstrip("+-")
    if implied and f.what != "point":
        digits = digits.replace(".", "").lstrip("0") or "0"
    if t.style == "words" and f.digits:
        digits = digits.rjust(f.digits, "0")
    if f.what == "point":
        return digits.rjust(f.digits, "0") if t.style == "words" and f.digits and digits else digits
    return sign + digits


def _assemble(t: Template, texts: dict[Field, str]) -> str:
    if t.style == "delimited":
        n = max(f.column or 0 for f in t.fields)
        cells = [""] * n
        for f, text in texts.items():
            cells[(f.column or 1) - 1] = text
        return t.separator.join(cells)
    if t.style == "fixed":
        n = max((f.start or 1) + (f.width or 0) - 1 for f in t.fields)
        chars = [" "] * n
        for f, text in texts.items():
            if len(text) > (f.width or 0):
                raise InstrumentLineInvalid(f"{t.name}: the {f.label()} {text!r} does not fit its width {f.width}")
            cell = text.rjust(f.width or 0)
            chars[(f.start or 1) - 1:(f.start or 1) - 1 + (f.width or 0)] = list(cell)
        return "".join(chars)
    gap = "0" * t.gap
    return t.separator.join(f"{f.code}{gap}{text}" for f, text in texts.items())


def wire(t: Template, line: str) -> bytes:
    """The bytes an instrument sends for ``line``: the line and the template's terminator."""
    return (line + TERMINATORS.get(t.terminator, t.terminator)).encode("ascii")


# -- template files -------------------------------------------------------------------------------------------
TOP_KEYS = {"name", "style", "separator", "terminator", "angle_unit", "distance_unit", "code_width", "gap",
            "implied_decimals", "target_height_m", "prism_constant_mm", "checksum", "field"}
FIELD_KEYS = {"what", "column", "start", "width", "code", "unit", "decimals", "implied_decimals", "digits", "equals"}
CHECKSUM_KEYS = {"kind", "mark", "from"}


def load_template(path: Path | str) -> Template:
    """A template from its TOML file, checked whole (``TemplateInvalid`` names the file, the key and the fix)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise TemplateInvalid(f"{path}: no such file; check the path (examples are in README.md, "
                              "'Instrument line templates')") from None
    except UnicodeDecodeError:
        raise TemplateInvalid(f"{path}: not a UTF-8 text file; save the template as UTF-8 text (TOML)") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise TemplateInvalid(f"{path}: not valid TOML ({exc}); check quotes, brackets and '=' on that line") from None
    return parse_template(doc, source=str(path))


def _fail(source: str, where: str, message: str) -> TemplateInvalid:
    return TemplateInvalid(f"{source}: {where}: {message}")


def parse_template(doc: dict[str, Any], *, source: str = "built-in") -> Template:
    """A template from its TOML document (a dict), every key checked."""
    unknown = sorted(set(doc) - TOP_KEYS)
    if unknown:
        raise _fail(source, unknown[0], f"is not a template key; the keys are {', '.join(sorted(TOP_KEYS))}")
    _check_types(source, "", doc)
    for key, kind in (("name", str), ("style", str)):
        if not isinstance(doc.get(key), kind) or not doc[key].strip():
            raise _fail(source, key, f"is missing; give the template's {key}"
                        + (f" ({', '.join(STYLES)})" if key == "style" else ", e.g. name = \"trench-csv\""))
    if doc["style"] not in STYLES:
        raise _fail(source, "style", f"{doc['style']!r} is not a style; use {', '.join(STYLES)}")
    cs = doc.get("checksum", {"kind": "none"})
    if isinstance(cs, str):
        cs = {"kind": cs}
    if not isinstance(cs, dict) or set(cs) - CHECKSUM_KEYS:
        raise _fail(source, "checksum", f"give a table with {', '.join(sorted(CHECKSUM_KEYS))}, e.g. "
                    "checksum = { kind = \"xor\", mark = \"*\" }")
    _check_types(source, "checksum ", cs)
    fields_in = doc.get("field")
    if not isinstance(fields_in, list) or not fields_in:
        raise _fail(source, "field", "no fields; add one [[field]] table per field of the line")
    fields = tuple(_field(source, i, f) for i, f in enumerate(fields_in, start=1))
    separator = doc.get("separator", " " if doc["style"] == "words" else ",")
    t = Template(
        name=doc["name"].strip(), style=doc["style"], fields=fields, separator=separator,
        terminator=doc.get("terminator", "CRLF"), angle_unit=doc.get("angle_unit", "deg"),
        distance_unit=doc.get("distance_unit", "m"), code_width=doc.get("code_width", 2), gap=doc.get("gap", 0),
        implied_decimals=doc.get("implied_decimals", False), target_height_m=doc.get("target_height_m"),
        prism_constant_mm=doc.get("prism_constant_mm", 0.0), checksum=cs.get("kind", "none"),
        checksum_mark=cs.get("mark"), checksum_from=cs.get("from", 1), source=source,
    )
    check_template(t)
    return t


_TYPES: dict[str, tuple[type, ...]] = {
    "name": (str,), "style": (str,), "separator": (str,), "terminator": (str,), "angle_unit": (str,),
    "distance_unit": (str,), "code_width": (int,), "gap": (int,), "implied_decimals": (bool,),
    "target_height_m": (int, float), "prism_constant_mm": (int, float), "what": (str,), "column": (int,),
    "start": (int,), "width": (int,), "code": (str,), "unit": (str,), "decimals": (int,), "digits": (int,),
    "equals": (str,), "kind": (str,), "mark": (str,), "from": (int,),
}


def _check_types(source: str, where: str, table: dict[str, Any]) -> None:
    for key, value in table.items():
        kinds = _TYPES.get(key)
        if kinds is None or key == "field" or key == "checksum":
            continue
        if isinstance(value, bool) != (kinds == (bool,)) or not isinstance(value, kinds):
            word = "a number" if float in kinds else {str: "text in quotes", int: "a whole number",
                                                          bool: "true or false"}[kinds[0]]
            raise _fail(source, f"{where}{key}", f"{value!r} is not {word}")


def _field(source: str, i: int, f: Any) -> Field:
    where = f"field {i}"
    if not isinstance(f, dict):
        raise _fail(source, where, "is not a table; write it as [[field]] with what = ... and where it is")
    unknown = sorted(set(f) - FIELD_KEYS)
    if unknown:
        raise _fail(source, f"{where} key {unknown[0]}", f"is not a field key; the keys are {', '.join(sorted(FIELD_KEYS))}")
    _check_types(source, f"{where} ", f)
    if f.get("what") not in WHATS:
        raise _fail(source, f"{where} what", f"{f.get('what')!r} is not known; use one of {', '.join(WHATS)}")
    try:
        return Field(**f)
    except TypeError as exc:
        raise _fail(source, where, str(exc)) from None


def check_template(t: Template) -> None:
    """Refuse a template that could not read a shot: every problem named with its key and the fix."""
    src = t.source
    for key, value, allowed in (("angle_unit", t.angle_unit, ANGLE_UNITS), ("distance_unit", t.distance_unit,
                                                                            DISTANCE_UNITS)):
        if value not in allowed:
            raise _fail(src, key, f"{value!r} is not known; use {', '.join(allowed)}")
    if t.terminator not in TERMINATORS and not (len(t.terminator) == 1 and t.terminator.isprintable()
                                                and t.terminator != t.separator):
        raise _fail(src, "terminator", f"{t.terminator!r} is not CRLF, CR, LF, ETX or one printable character")
    if t.checksum not in CHECKSUMS:
        raise _fail(src, "checksum kind", f"{t.checksum!r} is not known; use {', '.join(CHECKSUMS)}")
    if t.checksum != "none" and t.checksum_mark is not None and len(t.checksum_mark) != 1:
        raise _fail(src, "checksum mark", "give one character, e.g. \"*\"")
    if not isinstance(t.checksum_from, int) or t.checksum_from < 1:
        raise _fail(src, "checksum from", "give the first character the checksum covers, 1 = the line's first")
    if not isinstance(t.separator, str) or len(t.separator) != 1:
        raise _fail(src, "separator", f"{t.separator!r}: give one character, e.g. \",\" or \";\"")
    for key in ("code_width", "gap"):
        if not isinstance(getattr(t, key), int) or getattr(t, key) < 0 or (key == "code_width" and t.code_width < 1):
            raise _fail(src, key, "give a whole number of characters")
    if t.target_height_m is not None and not (isinstance(t.target_height_m, (int, float))
                                              and 0 <= t.target_height_m < MAX_TARGET_M):
        raise _fail(src, "target_height_m", f"give the pole height in metres, 0 to under {MAX_TARGET_M:g}")
    if not isinstance(t.prism_constant_mm, (int, float)) or abs(t.prism_constant_mm) > MAX_PRISM_MM:
        raise _fail(src, "prism_constant_mm", f"give it in mm, -{MAX_PRISM_MM:g} to {MAX_PRISM_MM:g}")
    _check_fields(t)


def _check_fields(t: Template) -> None:
    src = t.source
    whats = [f.what for f in t.fields if f.what != "text"]
    for what in set(whats):
        if whats.count(what) > 1:
            raise _fail(src, "field", f"two fields hold the {LABEL[what]}; keep one")
    needs = (("hz", ("hz",)), ("zenith", ("zenith", "elevation")), ("slope_distance",
                                                                       ("slope_distance", "horizontal_distance")))
    for label, options in needs:
        if not any(o in whats for o in options):
            raise _fail(src, "field", f"no field holds the {' or the '.join(LABEL[o] for o in options)}; add one "
                        f"(what = \"{options[0]}\")")
    if len([w for w in ("zenith", "elevation") if w in whats]) > 1 or \
            len([w for w in ("slope_distance", "horizontal_distance") if w in whats]) > 1:
        raise _fail(src, "field", "give either a zenith or a vertical angle, and either a slope or a horizontal "
                    "distance, not both")
    if "target_height" not in whats and t.target_height_m is None:
        raise _fail(src, "target_height_m", "no field holds the target height and none is fixed; add a field "
                    "(what = \"target_height\") or target_height_m = the pole height")
    for i, f in enumerate(t.fields, start=1):
        where = f"field {i} ({f.what})"
        if t.style == "delimited" and not (isinstance(f.column, int) and f.column >= 1):
            raise _fail(src, where, "give its column, 1 = the first field of the line")
        if t.style == "fixed" and not (isinstance(f.start, int) and f.start >= 1 and isinstance(f.width, int)
                                       and f.width >= 1):
            raise _fail(src, where, "give its start (1 = the first character) and width")
        if t.style == "words" and not (isinstance(f.code, str) and len(f.code) == t.code_width):
            raise _fail(src, where, f"give its code, {t.code_width} characters (code_width)")
        if f.what == "text" and not f.equals:
            raise _fail(src, where, "give the text the line must hold there (equals = \"...\")")
        if f.unit is not None:
            allowed = ANGLE_UNITS if f.what in ANGLE_FIELDS else DISTANCE_UNITS
            if f.unit not in allowed or f.what in ("point", "text", "angle_unit"):
                raise _fail(src, f"{where} unit", f"{f.unit!r} is not a unit of the {LABEL[f.what]}; use "
                            f"{', '.join(allowed)}")
        n_places = places(t, f)
        if not isinstance(n_places, int) or n_places < 0 or n_places > 9:
            raise _fail(src, f"{where} decimals", "give 0 to 9 places")
        if f.what in ANGLE_FIELDS and t.unit_of(f) == "dms" and n_places < 4:
            raise _fail(src, f"{where} decimals", "a DDD.MMSS angle needs at least 4 decimals (MMSS)")
        if t.field("angle_unit") is not None and f.what in ANGLE_FIELDS and n_places < 4:
            raise _fail(src, f"{where} decimals", "give at least 4 decimals: the line may name dms")
        if t.style == "fixed":
            others = [g for g in t.fields if g is not f and g.start is not None and g.width is not None]
            for g in others:
                if f.start < g.start + g.width and g.start < f.start + f.width:  # type: ignore[operator]
                    raise _fail(src, where, f"its characters overlap those of the {LABEL[g.what]}; check start and width")


def template_document(t: Template) -> dict[str, Any]:
    """The document (a TOML file's tables as a dict) that ``parse_template`` reads back into ``t``: what the
    tablet keeps of the template it was started with, so the file itself may move or go."""
    doc: dict[str, Any] = {
        "name": t.name, "style": t.style, "separator": t.separator, "terminator": t.terminator,
        "angle_unit": t.angle_unit, "distance_unit": t.distance_unit, "code_width": t.code_width, "gap": t.gap,
        "implied_decimals": t.implied_decimals, "prism_constant_mm": t.prism_constant_mm,
        "checksum": {"kind": t.checksum, "from": t.checksum_from,
                     **({"mark": t.checksum_mark} if t.checksum_mark is not None else {})},
        "field": [{k: v for k, v in f.__dict__.items() if v is not None} for f in t.fields],
    }
    if t.target_height_m is not None:
        doc["target_height_m"] = t.target_height_m
    return doc


def template_named(name: str) -> Template:
    """A built-in template by name (``bks`` or ``csv``)."""
    if name not in BUILT_IN:
        raise TemplateInvalid(f"there is no built-in template {name!r}; the built-in ones are "
                              f"{', '.join(BUILT_IN)}, or give the path of a template file")
    return BUILT_IN[name]


BKS = parse_template({
    "name": "bks", "style": "delimited", "separator": ",", "checksum": {"kind": "xor", "mark": "*"},
    "field": [
        {"what": "text", "column": 1, "equals": "BKS"}, {"what": "text", "column": 2, "equals": "1"},
        {"what": "hz", "column": 3, "decimals": 4}, {"what": "zenith", "column": 4, "decimals": 4},
        {"what": "slope_distance", "column": 5, "decimals": 4}, {"what": "target_height", "column": 6, "decimals": 3},
        {"what": "prism_constant", "column": 7, "decimals": 0}, {"what": "angle_unit", "column": 8},
    ],
})
CSV = parse_template({
    "name": "csv", "style": "delimited", "separator": ",",
    "field": [
        {"what": "point", "column": 1}, {"what": "hz", "column": 2}, {"what": "zenith", "column": 3},
        {"what": "slope_distance", "column": 4}, {"what": "target_height", "column": 5},
    ],
})
BUILT_IN: dict[str, Template] = {"bks": BKS, "csv": CSV}
