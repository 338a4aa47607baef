"""The day's download on the tablet (Day, "Attach download"): the points of the instrument's own file matched to
this tablet's finds by number, through today's accepted setup, shown for review and then written as the
finds' positions through the tablet's normal save path (versioned edits that sync; the live checks run again).

The matching is ``schema.survey.download`` (the same functions as the server's ``baulk survey attach``): a raw
point becomes the find's shot, its line kept as the shot's raw line, its position the setup's reduction; a
reduced point (the instrument's own E, N, Z) gives the find those coordinates exactly, with no shot, and a note
that the instrument reduced it. A point that would move a find further than ``max_move_m`` is written only when
the recorder confirms the moves.
"""

from __future__ import annotations

import math
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from schema.errors import FieldProblem, InputFileInvalid, MoveNotConfirmed, RecordInvalid, SetupNotReady
from schema.records import Find, Shot
from schema.survey import download as dl
from schema.survey.recompute import station_of
from schema.survey.templates import Template

from ..recording import Reading, plotted_fields
from .finds import FindController, Saved

__all__ = ["AttachController", "AttachReview", "parse_columns"]

MAX_MOVE_M = 0.10  # as the server's --max-move default (common practice, no source)
MAX_FILE_BYTES = 5_000_000  # a day's download is a few kB; anything this large is the wrong file


def parse_columns(text: str) -> dict[str, str]:
    """``point=PtID, e=East`` (what a column holds = its header), as typed on the tablet; empty: none."""
    out: dict[str, str] = {}
    for pair in (p.strip() for p in text.replace(";", ",").split(",")):
        if not pair:
            continue
        what, sep, header = pair.partition("=")
        if not sep or not what.strip() or not header.strip():
            raise RecordInvalid("download", [FieldProblem("columns", f"{pair!r} is not WHAT=HEADER",
                                                          "write e.g. point=PtID, e=East")])
        out[what.strip()] = header.strip()
    return out


@dataclass
class AttachReview:
    """A download read and matched, waiting for the recorder: what would be written, held, or left."""

    path: Path
    plan: dl.AttachPlan
    max_move_m: float
    setup_id: uuid.UUID
    lines: list[str] = field(default_factory=list)

    @property
    def to_write(self) -> list[dl.Match]:
        return [m for m in [*self.plan.matches, *self.plan.held] if not m.same]


class AttachController:
    """Read, review and attach a download on the tablet (see the module docstring)."""

    def __init__(self, finds: FindController, *, max_move_m: float = MAX_MOVE_M):
        self.finds, self.max_move_m = finds, max_move_m
        self.store, self.days = finds.store, finds.days

    def my_finds(self) -> list[Find]:
        """This tablet's finds at the day's site (another tablet's finds are attached on that tablet, or at camp)."""
        day = self.days.require_day()
        me = self.store.device_id()
        return [f for f in self.store.list(Find, site_id=day.site.id) if me is None or f.device_id == me]

    def review(self, path: str | Path, *, lines_template: Template | None = None, columns: str = "",
               angle_unit: str | None = None, target_height_m: str = "", prefix: str = "",
               max_move_m: float | None = None) -> AttachReview:
        """Read the download at ``path`` (instrument lines in ``lines_template``, else a CSV with a header, its
        columns named by ``columns``) and match it through today's accepted setup; nothing is written. Moves
        past ``max_move_m`` (default the controller's, from ``TabletSettings.download_max_move_m``) are held."""
        max_move_m = self.max_move_m if max_move_m is None else max_move_m
        setup = self.days.require_setup()
        station = station_of(setup)
        path = Path(str(path).strip())
        text = _read(path)
        th = _metres(target_height_m)
        points = dl.read_download(text, source=path.name, setup_unit=station.angle_unit, template=lines_template,
                                  columns=parse_columns(columns), angle_unit=angle_unit or None, target_height_m=th)
        if not points:
            raise InputFileInvalid(f"{path.name}: no points in the file; choose the instrument's download")
        mine = self.my_finds()
        numbers = {dl.find_number(p.point, prefix) for p in points}
        held_lines = {f.id: self.store.get(Shot, f.shot_id).raw_line for f in mine
                      if f.number in numbers and f.shot_id is not None}
        plan = dl.plan_attach(points, mine, station, prefix=prefix, max_move_m=max_move_m, confirm_moves=False,
                              held_lines=held_lines)
        others = {f.number for f in self.store.list(Find, site_id=setup.site_id)} - {f.number for f in mine}
        plan.unmatched = [(p, _whose(why, dl.find_number(p.point, prefix), others)) for p, why in plan.unmatched]
        review = AttachReview(path, plan, max_move_m, setup.id)
        review.lines = _summary(review, setup.station_code)
        return review

    def attach(self, review: AttachReview, *, confirm_moves: bool = False) -> list[Saved]:
        """Write each match of ``review`` as its find's position (a raw point with its shot) through the tablet's
        save path, the whole download in one transaction, then run each find's live checks. Moves past the
        review's limit need ``confirm_moves``; without it, or when the setup changed since the review, nothing is
        written."""
        if review.plan.held and not confirm_moves:
            moves = "; ".join(f"find {m.number} by {m.move_m:.3f} m (point {m.point.point})" for m in review.plan.held)
            raise MoveNotConfirmed(f"{len(review.plan.held)} point{'s' if len(review.plan.held) > 1 else ''} would "
                                   f"move {'their finds' if len(review.plan.held) > 1 else 'its find'} further than "
                                   f"{review.max_move_m:g} m: {moves}; nothing was written. Check them, then tick "
                                   "'Move them' and attach again")
        setup = self.days.require_setup()
        if setup.id != review.setup_id:
            raise SetupNotReady("the instrument setup changed since the download was checked; check it again")
        day = self.days.require_day()
        saved = []
        with self.store.atomic():  # the whole download or nothing
            for m in review.to_write:
                current = self.store.get(Find, m.find_id)
                if m.point.kind == "raw":
                    reading = Reading(m.hz, m.zenith, m.slope_distance_m, m.point.target_height_m,  # type: ignore[arg-type]
                                      day.now(), prism_constant_mm=m.point.prism_constant_mm,
                                      raw_line=m.point.raw_line[:1000])
                    shot, fields = plotted_fields(setup, reading)
                    self.store.add(shot)
                else:  # the instrument's own coordinates, exactly; no shot poses as observed (download.py)
                    fields = dl.reduced_changes(m.point, m.e, m.n, m.z, notes=current.notes,  # type: ignore[arg-type]
                                                source=review.path.name)
                after = self.store.update_find(find={**current.model_dump(), **fields})
                saved.append((current, after))
        return [Saved(after, self.finds._check(after), written=self.finds._written(before, after))
                for before, after in saved]


def _whose(why: str, number: int | None, others: set[int]) -> str:
    """Why a point matched nothing, saying so when its find is another tablet's."""
    if why.startswith("no find ") and number in others:
        return f"find {number} is another tablet's; attach it there or at camp"
    return why


def _read(path: Path) -> str:
    if not path.name:
        raise InputFileInvalid("no file was chosen; choose the instrument's download")
    try:
        if path.stat().st_size > MAX_FILE_BYTES:
            raise InputFileInvalid(f"{path.name} is {path.stat().st_size // 1_000_000} MB: not a day's download; "
                                   "choose the instrument's file")
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileInvalid(f"{path}: no such file; choose the download again") from None
    except IsADirectoryError:
        raise InputFileInvalid(f"{path} is a folder; choose the download file in it") from None
    except UnicodeDecodeError:
        raise InputFileInvalid(f"{path.name} is not a text file; choose the instrument's CSV or line file") from None


def _metres(text: str) -> float | None:
    text = (text or "").strip().replace(",", ".")
    if not text:
        return None
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and 0 <= value < 10):
        raise RecordInvalid("download", [FieldProblem("target height", f"{text!r} is not a pole height",
                                                      "type it in metres, e.g. 1.300, or leave it empty")])
    return value


def _summary(review: AttachReview, station: str) -> list[str]:
    """What the review shows: each point that would be written, held, already there, or left, and the finds
    still waiting for a point."""
    plan = review.plan
    out = [f"{review.path.name} through today's setup at {station}:"]

    def where(m: dl.Match) -> str:
        was = "no position before" if m.was is None else f"moves {m.move_m:.3f} m"
        return (f"point {m.point.point} -> find {m.number}: E {m.e:.3f} N {m.n:.3f} Z {m.z:.3f} "
                f"({'reduced by the instrument' if m.point.kind == 'reduced' else 'raw'}; {was})")

    new = [m for m in plan.matches if not m.same]
    out.append(f"Matched: {len(new)}")
    out += [f"  {where(m)}" for m in new]
    if plan.held:
        out.append(f"MOVES MORE THAN {review.max_move_m:g} m, written only if you tick 'Move them': {len(plan.held)}")
        out += [f"  {where(m)}" for m in plan.held]
    same = [m for m in plan.matches if m.same]
    if same:
        out.append("Already attached: " + ", ".join(f"find {m.number}" for m in same))
    out.append(f"Points matching no find of this tablet: {len(plan.unmatched)}")
    out += [f"  line {p.line} point {p.point}: {why}" for p, why in plan.unmatched]
    waiting = plan.finds_without_point
    out.append(f"Plotted finds without a point: {', '.join(map(str, waiting)) if waiting else 'none'}")
    return out
