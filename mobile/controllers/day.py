"""Day start: which site, season and trench, who records, the unit being dug, and the instrument setup.

The choices are kept in the tablet file's local settings, so the app reopens where the recorder left it. A
total-station setup is computed by the survey engine and shown with its residuals; shots are refused until
the recorder accepts it (the laser caution is acknowledged with it).
"""

from __future__ import annotations

import datetime as dt
import uuid
import zoneinfo
from dataclasses import dataclass, field

import sqlalchemy as sa
from pydantic import TypeAdapter, ValidationError

from schema.errors import FieldProblem, RecordInvalid, RecordNotFound, SetupNotReady
from schema.records import ControlPoint, SafetyCheck, Season, Site, StationSetup, Trench, Unit
from schema.fields import Initials
from schema.survey.templates import Template
from schema.tables import metadata

from ..cautions import Caution, heat_caution, laser_caution
from ..instruments import GnssMonitor, parse_shot_line
from ..recording import setup_by_backsight, setup_by_resection
from ..settings import GNSS_MAX_AGE_S, instrument_template
from ..store import TabletStore

__all__ = ["Day", "DayController", "GNSS_MAX_AGE_S", "SetupReview", "record_acknowledgement"]



@dataclass
class Day:
    """What the recorder chose at day start (and the accepted setup, once there is one)."""

    site: Site
    season: Season
    trench: Trench
    recorder: str
    unit: Unit | None = None
    setup: StationSetup | None = None

    @property
    def tz(self) -> dt.tzinfo:
        return zoneinfo.ZoneInfo(self.site.timezone)

    def now(self) -> dt.datetime:
        return dt.datetime.now(self.tz)


@dataclass
class SetupReview:
    """A computed setup waiting for the recorder's acceptance: the residual lines to show and any warnings."""

    setup: StationSetup
    lines: list[str]
    warnings: list[str] = field(default_factory=list)


class DayController:
    """Day start and the instruments; the other controllers read ``day``."""

    def __init__(self, store: TabletStore, *, laser_class: str = "see the instrument's label",
                 gnss_max_age_s: float = GNSS_MAX_AGE_S, template: Template | None = None):
        self.store = store
        # the instrument line template: the one given (then remembered by the tablet file), else the remembered one
        self.template = instrument_template(store, template)
        self.laser_class = laser_class
        self.gnss = GnssMonitor()
        self.gnss_max_age_s = gnss_max_age_s
        self.gnss_read_at: dt.datetime | None = None  # when this tablet received the latest fix
        self.day: Day | None = None
        self.review: SetupReview | None = None

    # -- choices --------------------------------------------------------------------------------------------
    def sites(self) -> list[Site]:
        return self.store.list(Site, order_by="code")

    def seasons(self, site: Site) -> list[Season]:
        return self.store.list(Season, site_id=site.id, order_by="starts_on")

    def trenches(self, site: Site) -> list[Trench]:
        return self.store.list(Trench, site_id=site.id, order_by="code")

    def units(self) -> list[Unit]:
        day = self.require_day()
        return self.store.list(Unit, trench_id=day.trench.id, order_by="code")

    def start(self, *, site_code: str, season_label: str, trench_code: str, recorder: str) -> Day:
        """Start (or change) the day; names the field that is wrong when a choice is missing."""
        problems = []
        site = next((s for s in self.sites() if s.code == site_code), None)
        if site is None:
            problems.append(FieldProblem("site", f"no site {site_code!r} on this tablet", "sync with the camp server first"))
            raise RecordInvalid("day start", problems)
        season = next((s for s in self.seasons(site) if s.label == season_label), None)
        trench = next((t for t in self.trenches(site) if t.code == trench_code), None)
        if season is None:
            problems.append(FieldProblem("season", f"no season {season_label!r} at {site.code}", "choose a season from the list"))
        if trench is None:
            problems.append(FieldProblem("trench", f"no trench {trench_code!r} at {site.code}", "choose a trench from the list"))
        try:
            TypeAdapter(Initials).validate_python(recorder)
        except ValidationError:
            problems.append(FieldProblem("recorder", f"{recorder!r} is not a recorder's initials" if recorder.strip()
                                         else "no initials were typed", "type 2-4 capital letters, e.g. AK"))
        if problems:
            raise RecordInvalid("day start", problems)
        assert season is not None and trench is not None
        with self.store.atomic() as conn:
            for key, value in (("day.site", site.code), ("day.season", season.label), ("day.trench", trench.code),
                               ("day.recorder", recorder), ("day.date", dt.date.today().isoformat()),
                               ("day.unit_code", None), ("day.setup_id", None)):
                self.store.set_setting(key, value, conn=conn)
        self.day = Day(site=site, season=season, trench=trench, recorder=recorder)
        return self.day

    def resume(self) -> Day | None:
        """The day the tablet was on, if it was started today (a new day starts with the day screen)."""
        if self.store.setting("day.date") != dt.date.today().isoformat():
            return None
        unit, setup = self.store.setting("day.unit_code"), self.store.setting("day.setup_id")
        try:
            day = self.start(site_code=self.store.setting("day.site") or "", season_label=self.store.setting("day.season") or "",
                             trench_code=self.store.setting("day.trench") or "", recorder=self.store.setting("day.recorder") or "")
        except RecordInvalid:
            return None
        if unit:
            self.choose_unit(unit)
        if setup:
            day.setup = self.store.get(StationSetup, uuid.UUID(setup))
            self.store.set_setting("day.setup_id", setup)
        return day

    def require_day(self) -> Day:
        if self.day is None:
            raise RecordInvalid("day start", [FieldProblem("day", "the day has not been started", "open Day and choose the trench and your initials")])
        return self.day

    def choose_unit(self, code: str) -> Unit:
        unit = next((u for u in self.units() if u.code == code), None)
        if unit is None:
            raise RecordNotFound(f"no unit {code!r} in trench {self.require_day().trench.code}; add it under Units")
        self.require_day().unit = unit
        self.store.set_setting("day.unit_code", unit.code)
        return unit

    def day_cautions(self) -> list[Caution]:
        """Shown when the day starts."""
        return [heat_caution(), laser_caution(self.laser_class)]

    # -- instrument setup -----------------------------------------------------------------------------------
    def control_points(self) -> list[ControlPoint]:
        return self.store.list(ControlPoint, site_id=self.require_day().site.id, order_by="code")

    def _point(self, code: str) -> ControlPoint:
        cp = next((c for c in self.control_points() if c.code == code), None)
        if cp is None:
            raise RecordNotFound(f"no control point {code!r} at this site; choose one from the list")
        return cp

    def set_up_on_point(self, *, station: str, backsights: list[tuple[str, str]], instrument_height_m: float) -> SetupReview:
        """Occupy a datum and orient on backsights, each given as (point code, BKS shot line)."""
        day = self.require_day()
        readings = [(self._point(code), parse_shot_line(line, template=self.template))
                    for code, line in backsights]
        unit = readings[0][1][1] if readings else "deg"
        setup, result = setup_by_backsight(
            self.store, site=day.site, station=self._point(station), backsights=[(cp, r) for cp, (r, _u) in readings],
            instrument_height_m=instrument_height_m, angle_unit=unit, recorder=day.recorder, at=day.now())
        lines = [f"{b.code}: angle {b.angle_residual:+.4f} {unit}"
                 + (f", distance {b.distance_residual_m * 1000:+.1f} mm" if b.distance_residual_m is not None else "")
                 for b in result.backsights]
        self.review = SetupReview(setup, lines, list(result.warnings))
        return self.review

    def set_up_free_station(self, *, code: str, observations: list[tuple[str, str]], instrument_height_m: float,
                            tolerance_m: float = 0.01) -> SetupReview:
        """Free station on two or more control points, each given as (point code, BKS shot line)."""
        day = self.require_day()
        readings = [(self._point(c), parse_shot_line(line, template=self.template))
                    for c, line in observations]
        unit = readings[0][1][1] if readings else "deg"
        setup, result = setup_by_resection(
            self.store, site=day.site, code=code, observations=[(cp, r) for cp, (r, _u) in readings],
            instrument_height_m=instrument_height_m, angle_unit=unit, tolerance_m=tolerance_m,
            recorder=day.recorder, at=day.now())
        lines = [f"{r['point']}: {float(r['d']) * 1000:.1f} mm" for r in result.residuals]
        lines.append(f"scale {result.scale_ppm:+.0f} ppm")
        self.review = SetupReview(setup, lines, list(result.warnings))
        return self.review

    def accept_setup(self, *, laser_acknowledged_by: str) -> StationSetup:
        """Accept the setup under review (recording the laser caution as acknowledged)."""
        day = self.require_day()
        if self.review is None:
            raise SetupNotReady("there is no setup to accept; set the instrument up first")
        if not laser_acknowledged_by.strip():
            raise RecordInvalid("setup", [FieldProblem("laser", "the laser caution was not acknowledged",
                                                       "type who set the instrument up")])
        with self.store.atomic() as conn:
            record_acknowledgement(self.store, kind="laser", site_id=day.site.id, trench_id=day.trench.id,
                                   recorder=day.recorder, by=laser_acknowledged_by, at=day.now(),
                                   laser_class=self.laser_class)
            self.store.set_setting("day.setup_id", str(self.review.setup.id), conn=conn)
        day.setup, self.review = self.review.setup, None
        return day.setup

    def acknowledge_heat(self, *, by: str) -> SafetyCheck:
        """Record that the heat caution shown at day start was read (who acknowledged it), like the laser's."""
        day = self.require_day()
        return record_acknowledgement(self.store, kind="heat", site_id=day.site.id, trench_id=day.trench.id,
                                      recorder=day.recorder, by=by, at=day.now())

    def heat_acknowledged(self) -> SafetyCheck | None:
        """Today's heat acknowledgement for the day's trench, if there is one."""
        day = self.require_day()
        today = day.now().date()
        done = [c for c in self.store.list(SafetyCheck, trench_id=day.trench.id, kind="heat")
                if c.checked_at.astimezone(day.tz).date() == today]
        return max(done, key=lambda c: c.checked_at) if done else None

    def require_setup(self) -> StationSetup:
        setup = self.require_day().setup
        if setup is None:
            raise SetupNotReady("no instrument setup has been accepted today; set the instrument up on Day first, "
                                "or take the position by GNSS or tape")
        return setup

    def answer_caution(self, caution: Caution, answer: str) -> SafetyCheck:
        """Record the recorder's answer to a caution (what was checked, and by whom)."""
        day = self.require_day()
        if not answer.strip():
            raise RecordInvalid("caution", [FieldProblem("answer", "the caution was not answered", caution.ask)])
        return self.store.add(SafetyCheck(
            site_id=day.site.id, trench_id=day.trench.id, unit_id=day.unit.id if day.unit else None,
            kind=caution.kind, depth_m=caution.depth_m, answer=answer.strip()[:500], recorder=day.recorder,  # type: ignore[arg-type]
            checked_at=day.now()))

    # -- GNSS -----------------------------------------------------------------------------------------------
    def feed_gnss(self, lines: list[str], *, now: dt.datetime | None = None) -> str:
        """Lines from the receiver; returns the status line to show. A new fix starts its age at ``now``."""
        before = self.gnss.latest
        self.gnss.feed(lines)
        self.gnss.flush()
        if self.gnss.latest is not None and self.gnss.latest is not before:
            self.gnss_read_at = now or dt.datetime.now(dt.timezone.utc)
        return self.gnss.status()

    def gnss_age_s(self, now: dt.datetime | None = None) -> float | None:
        """Seconds since this tablet received the latest fix (None before any)."""
        if self.gnss_read_at is None or self.gnss.latest is None:
            return None
        return max(0.0, ((now or dt.datetime.now(dt.timezone.utc)) - self.gnss_read_at).total_seconds())

    def gnss_used_by(self) -> int | None:
        """The number of a find already placed by the latest fix (the same raw sentences), if any."""
        if self.gnss.latest is None:
            return None
        fix_t, find_t = metadata.tables["gnss_fix"], metadata.tables["find"]
        raw = list(self.gnss.latest.sentences)
        with self.store.read() as conn:
            rows = conn.execute(sa.select(fix_t.c.id, fix_t.c.raw_sentences, find_t.c.number)
                                .join(find_t, find_t.c.gnss_fix_id == fix_t.c.id)
                                .where(fix_t.c.lat == self.gnss.latest.lat, fix_t.c.lon == self.gnss.latest.lon)).all()
        return next((r.number for r in rows if list(r.raw_sentences) == raw), None)

    def gnss_problems(self, now: dt.datetime | None = None) -> list[str]:
        """Why the latest fix should not place a new find without a reason: too old, or already used."""
        age, used = self.gnss_age_s(now), self.gnss_used_by()
        out = []
        if age is not None and age > self.gnss_max_age_s:
            out.append(f"the fix is {_age_words(age)} old (the limit is {self.gnss_max_age_s:.0f} s)")
        if used is not None:
            out.append(f"the fix already placed find {used}")
        return out

    def gnss_line(self, now: dt.datetime | None = None) -> str:
        """The receiver's status with the fix's age and, when it is stale or used, what to do."""
        age = self.gnss_age_s(now)
        if age is None:
            return self.gnss.status() + "; tap Read receiver"
        line = f"{self.gnss.status()}; read {_age_words(age)} ago"
        problems = self.gnss_problems(now)
        if problems:
            line += ". OLD FIX: " + "; ".join(problems) + ". Read the receiver again, or give a reason"
        return line


def record_acknowledgement(store: TabletStore, *, kind: str, site_id: uuid.UUID, trench_id: uuid.UUID, recorder: str,
                           by: str, at: dt.datetime, laser_class: str | None = None) -> SafetyCheck:
    """Keep a day-start caution's acknowledgement (``heat``, or ``laser`` with the instrument's class) as a
    safety check; the answer says what was read and who acknowledged it, nothing more. The app and the demo
    both write them through here."""
    if not by.strip():
        field = "laser" if kind == "laser" else kind
        raise RecordInvalid("acknowledgement", [FieldProblem(field, f"the {kind} caution was not acknowledged",
                                                             "type who read it (initials)")])
    if kind == "laser":
        answer = f"laser class {laser_class}; acknowledged by {by.strip()}"
    elif kind == "heat":
        answer = f"heat caution read at day start; acknowledged by {by.strip()}"
    else:
        raise ValueError(f"{kind!r} is not a day-start caution (heat or laser)")
    return store.add(SafetyCheck(site_id=site_id, trench_id=trench_id, kind=kind, answer=answer[:500],  # type: ignore[arg-type]
                                 recorder=recorder, checked_at=at))


def _age_words(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    return f"{seconds / 60:.1f} min"
