"""The day's download from the instrument's own data collector, matched to finds: pure functions over text and
records. The server's ``baulk survey attach`` (``sync_server/survey_jobs.py``) and the tablet's Day screen
(``mobile/controllers/attach.py``) read the file, call these, and write the result through their own save paths.

A download is a CSV with a header, or lines in an instrument line template. Each point is either raw (hz,
zenith, slope distance: reduced here through the setup, like a shot on the tablet) or reduced (e, n, z: the
instrument's own coordinates).

A raw point becomes the find's shot (its line kept as the shot's raw line) and the find's position is what the
setup reduces it to; a corrected setup moves it again. A reduced point is kept as what it is, a position the
instrument computed: the find takes its E, N, Z exactly, with no shot (Baulk never saw the readings, and
readings back-computed through a setup would pose as observations and move the point when a setup the
instrument never used is corrected); ``reduced_note`` says so in the find's notes, with the point's line.

A point matches the find whose number it carries (after an optional prefix, leading zeros ignored). A match that
would move a find by more than ``max_move_m`` is held until confirmed; nothing is guessed.
"""

from __future__ import annotations

import csv
import math
import uuid
from dataclasses import dataclass, field
from typing import Any, Iterable

from ..errors import InputFileInvalid, InstrumentLineInvalid
from . import templates as tpl
from .polar import Station, reduce_shots

__all__ = ["COLUMNS", "AttachPlan", "DownloadPoint", "Match", "find_number", "plan_attach", "read_download",
           "read_download_csv", "read_download_lines", "reduced_changes", "reduced_note", "REDUCED_SIGMA_M"]

COLUMNS = ("point", "hz", "zenith", "slope_distance", "target_height", "prism_constant_mm", "e", "n", "z")
"""What a download column may hold (``--column WHAT=HEADER`` names the header of each)."""
_DEFAULT_HEADERS = {"point": ("point", "id", "number", "pt")}
RAW = ("hz", "zenith", "slope_distance")
REDUCED = ("e", "n", "z")


@dataclass(frozen=True)
class DownloadPoint:
    """One point of a download: its id, where it came from, its raw readings (in the setup's angle unit) and,
    for a reduced point, the instrument's coordinates."""

    point: str
    line: int
    raw_line: str
    kind: str  # "raw" or "reduced"
    hz: float = math.nan
    zenith: float = math.nan
    slope_distance_m: float = math.nan
    target_height_m: float = 0.0
    prism_constant_mm: float = 0.0
    e: float | None = None
    n: float | None = None
    z: float | None = None


def _float(text: str, source: str, line: int, header: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputFileInvalid(f"{source} line {line}: {header} {text!r} is not a number; give it as digits with a "
                               "decimal point") from None
    if not math.isfinite(value):
        raise InputFileInvalid(f"{source} line {line}: {header} {text!r} is not a finite number")
    return value


def read_download_csv(
    text: str, *, source: str, setup_unit: str, columns: dict[str, str] | None = None, angle_unit: str | None = None,
    target_height_m: float | None = None,
) -> list[DownloadPoint]:
    """Points of a CSV download. ``columns`` maps what a column holds to its header (else the header is the name:
    ``point`` (or ``id``, ``number``), ``hz``, ``zenith``, ``slope_distance``, ``target_height``,
    ``prism_constant_mm``, or ``e``, ``n``, ``z``); ``angle_unit`` is the file's (deg, gon, dms, mil; default the
    setup's). Every row is checked first: one bad row reads nothing."""
    columns = dict(columns or {})
    unknown = sorted(set(columns) - set(COLUMNS))
    if unknown:
        raise InputFileInvalid(f"--column {unknown[0]}=...: {unknown[0]!r} is not something a download column holds; "
                               f"use one of {', '.join(COLUMNS)}")
    lines = text.splitlines()
    reader = csv.reader(lines)
    header = [h.strip() for h in next(reader, [])]
    if not any(header):
        raise InputFileInvalid(f"{source}: the file is empty; give the instrument's download with a header line")
    where = {h: i for i, h in enumerate(header)}
    for what in COLUMNS:
        if what not in columns:
            found = next((h for h in (_DEFAULT_HEADERS.get(what) or (what,)) if h in where), None)
            if found:
                columns[what] = found
    missing = [f"{w} ({columns[w]!r})" for w in columns if columns[w] not in where]
    if missing:
        raise InputFileInvalid(f"{source}: no column {', '.join(missing)} in the header ({', '.join(header)}); "
                               "name the columns with --column WHAT=HEADER")
    if "point" not in columns:
        raise InputFileInvalid(f"{source}: no point column (point, id or number) in the header ({', '.join(header)}); "
                               "name it with --column point=HEADER")
    raw = all(c in columns for c in RAW)
    reduced = all(c in columns for c in REDUCED)
    if not raw and not reduced:
        raise InputFileInvalid(f"{source}: the header ({', '.join(header)}) has neither the raw readings (hz, "
                               "zenith, slope_distance) nor the coordinates (e, n, z); name them with --column")
    if raw and "target_height" not in columns and target_height_m is None:
        raise InputFileInvalid(f"{source}: no target_height column; name it with --column target_height=HEADER, or "
                               "give the pole height for every point with --target-height")
    unit = angle_unit or setup_unit
    out: list[DownloadPoint] = []
    seen: dict[str, int] = {}
    for number, row in enumerate(reader, start=2):
        if not any(c.strip() for c in row):
            continue
        cell = lambda what: row[where[columns[what]]].strip() if where[columns[what]] < len(row) else ""  # noqa: E731
        point = cell("point")
        if not point:
            raise InputFileInvalid(f"{source} line {number}: the point id ({columns['point']}) is empty")
        if point in seen:
            raise InputFileInvalid(f"{source} line {number}: point {point!r} is also on line {seen[point]}; keep "
                                   "one reading per point (delete the one taken in error)")
        seen[point] = number
        raw_line = lines[number - 1] if number - 1 < len(lines) else ",".join(row)
        if raw:
            values = {}
            for what in RAW:
                text_ = cell(what)
                if what == "slope_distance":
                    values[what] = _float(text_, source, number, columns[what])
                    continue
                try:
                    degrees = tpl.angle_from_text(text_, unit)
                except ValueError as exc:
                    raise InputFileInvalid(f"{source} line {number}: {columns[what]} {text_!r}: {exc} (read as "
                                           f"{tpl.UNIT_WORDS[unit]}); give --angle-unit if the file is in another "
                                           "unit") from None
                values[what] = tpl.from_degrees(degrees, setup_unit)
            th = (_float(cell("target_height"), source, number, columns["target_height"])
                  if "target_height" in columns else float(target_height_m))  # type: ignore[arg-type]
            pc = (_float(cell("prism_constant_mm"), source, number, columns["prism_constant_mm"])
                  if "prism_constant_mm" in columns else 0.0)
            out.append(DownloadPoint(point, number, raw_line, "raw", values["hz"], values["zenith"],
                                     values["slope_distance"], th, pc))
        else:
            e, n, z = (_float(cell(w), source, number, columns[w]) for w in REDUCED)
            th = (_float(cell("target_height"), source, number, columns["target_height"])
                  if "target_height" in columns else (target_height_m or 0.0))
            out.append(DownloadPoint(point, number, raw_line, "reduced", target_height_m=th, e=e, n=n, z=z))
    return out


def read_download_lines(text: str, *, source: str, template: tpl.Template, setup_unit: str) -> list[DownloadPoint]:
    """Points of a download written as instrument lines (one a line) in ``template``; one bad line reads nothing
    and is named with its number and the field that failed."""
    if template.field("point") is None:
        raise InputFileInvalid(f"{source}: template {template.name} has no point field, so its lines cannot be matched "
                               "to finds; use a template with a point id (what = \"point\")")
    out: list[DownloadPoint] = []
    seen: dict[str, int] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            d = tpl.decode(template, line)
        except InstrumentLineInvalid as exc:
            raise InputFileInvalid(f"{source} line {number}: {exc}") from None
        o = d.observation
        if not o.point:
            raise InputFileInvalid(f"{source} line {number}: the point id is empty")
        if o.point in seen:
            raise InputFileInvalid(f"{source} line {number}: point {o.point!r} is also on line {seen[o.point]}; keep "
                                   "one reading per point")
        seen[o.point] = number
        hz, zen = (tpl.from_degrees(tpl.to_degrees(v, o.angle_unit), setup_unit) if o.angle_unit != setup_unit else v
                   for v in (o.hz, o.zenith))
        out.append(DownloadPoint(o.point, number, d.raw, "raw", hz, zen, o.slope_distance_m, o.target_height_m,
                                 o.prism_constant_mm))
    return out


@dataclass(frozen=True)
class Match:
    """A point matched to a find: the readings to keep as its shot (None for a reduced point: it has none), where
    it puts the find, how far it moves it."""

    point: DownloadPoint
    find_id: uuid.UUID
    number: int
    hz: float | None
    zenith: float | None
    slope_distance_m: float | None
    e: float
    n: float
    z: float
    was: tuple[float, float, float] | None
    move_m: float | None
    same: bool = False  # the find already holds this very point (a download attached again)


@dataclass
class AttachPlan:
    """What an attach would do: the matches, the moves held for confirmation, and what matched nothing."""

    matches: list[Match] = field(default_factory=list)
    held: list[Match] = field(default_factory=list)
    unmatched: list[tuple[DownloadPoint, str]] = field(default_factory=list)
    finds_without_point: list[int] = field(default_factory=list)


def find_number(point: str, prefix: str = "") -> int | None:
    """The find number a point id carries (``prefix`` removed, leading zeros ignored), or None."""
    text = point.strip()
    if prefix:
        if not text.startswith(prefix):
            return None
        text = text[len(prefix):]
    return int(text) if text.isdigit() and int(text) > 0 else None


def plan_attach(
    points: Iterable[DownloadPoint], finds: Iterable[Any], station: Station, *, prefix: str = "",
    max_move_m: float = 0.10, confirm_moves: bool = False, held_lines: dict[uuid.UUID, str | None] | None = None,
) -> AttachPlan:
    """Match points to finds (records with ``id, number, e, n, z, voided, recovery, position_source, shot_id``)
    and reduce the raw points through ``station`` (a reduced point keeps the instrument's E, N, Z exactly).
    ``held_lines`` gives the raw line of each find's current shot (a point attached again is then reported as the
    same, not written twice)."""
    points = list(points)
    by_number: dict[int, list[Any]] = {}
    for f in finds:
        by_number.setdefault(f.number, []).append(f)
    held_lines = held_lines or {}
    plan = AttachPlan()
    matched: set[uuid.UUID] = set()
    raw_points = []
    for p in points:
        number = find_number(p.point, prefix)
        live = [f for f in by_number.get(number or -1, []) if not f.voided]
        if number is None:
            plan.unmatched.append((p, "not a find number" + (f" (no prefix {prefix!r})" if prefix else "")))
        elif not live:
            voided = by_number.get(number)
            plan.unmatched.append((p, f"find {number} is voided" if voided else f"no find {number}"))
        elif len(live) > 1:
            plan.unmatched.append((p, f"find number {number} is held by {len(live)} finds; settle the duplicate first"))
        else:
            raw_points.append((p, live[0]))
    raw = [(p, f) for p, f in raw_points if p.kind == "raw"]
    if raw:
        r = reduce_shots(station, [p.hz for p, _f in raw], [p.zenith for p, _f in raw],
                         [p.slope_distance_m for p, _f in raw], [p.target_height_m for p, _f in raw],
                         [p.prism_constant_mm for p, _f in raw])
        at = {id(p): (float(e), float(n), float(z)) for (p, _f), e, n, z in zip(raw, r.e, r.n, r.z)}
    for p, f in raw_points:
        was = (f.e, f.n, f.z) if f.e is not None and f.n is not None and f.z is not None else None
        if p.kind == "raw":
            (e, n, z), readings = at[id(p)], (p.hz, p.zenith, p.slope_distance_m)
        else:  # the instrument's own coordinates, taken as they are
            (e, n, z), readings = (p.e, p.n, p.z), (None, None, None)  # type: ignore[assignment]
        move = math.dist(was, (e, n, z)) if was else None
        if p.kind == "raw":
            same = held_lines.get(f.id) == p.raw_line and move is not None and move < 1e-6
        else:
            same = move == 0.0 and f.position_source == "total_station" and getattr(f, "shot_id", None) is None
        m = Match(p, f.id, f.number, *readings, e, n, z, was, move, same)
        matched.add(f.id)
        if move is not None and move > max_move_m and not confirm_moves:
            plan.held.append(m)
        else:
            plan.matches.append(m)
    plan.finds_without_point = sorted(
        f.number for fs in by_number.values() for f in fs
        if not f.voided and f.recovery == "plotted" and f.position_source == "none" and f.id not in matched)
    return plan


def reduced_note(point: DownloadPoint, source: str) -> str:
    """What a find's notes keep of a reduced point: that the instrument computed the position, and its line."""
    line = point.raw_line if len(point.raw_line) <= 300 else point.raw_line[:300] + "..."
    return f"[position reduced by the instrument: point {point.point}, line {point.line} of {source}: {line}]"


REDUCED_SIGMA_M = 0.005  # a total-station position's usual standard error (common practice, no source)


def reduced_changes(point: DownloadPoint, e: float, n: float, z: float, *, notes: str, source: str) -> dict[str, Any]:
    """The find fields a point the instrument reduced sets: its E, N, Z exactly, no shot (readings back-computed
    through a setup would pose as observations), and the point's line kept in the notes (``reduced_note``)."""
    return {"e": e, "n": n, "z": z, "position_source": "total_station", "shot_id": None, "gnss_fix_id": None,
            "position_sigma_m": REDUCED_SIGMA_M, "notes": f"{notes}\n{reduced_note(point, source)}".strip()}


def read_download(
    text: str, *, source: str, setup_unit: str, template: tpl.Template | None = None,
    columns: dict[str, str] | None = None, angle_unit: str | None = None, target_height_m: float | None = None,
) -> list[DownloadPoint]:
    """The points of a download: instrument lines through ``template`` when given, else a CSV with a header."""
    if template is not None:
        return read_download_lines(text, source=source, template=template, setup_unit=setup_unit)
    return read_download_csv(text, source=source, setup_unit=setup_unit, columns=columns, angle_unit=angle_unit,
                             target_height_m=target_height_m)
