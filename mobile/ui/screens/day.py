"""Day start: site, season, trench, initials; the instrument setup with its residuals, accepted before shots are
taken (the laser caution acknowledged with it); the instrument's template and last line; attaching the
instrument's own download (``mobile/ui/attach.py``); the GNSS receiver's status; the theme."""

from __future__ import annotations

from typing import Any

from kivy.properties import ListProperty, StringProperty

from . import BaulkScreen

__all__ = ["DayScreen"]

NONE = "-"


class DayScreen(BaulkScreen):
    sites = ListProperty([])
    seasons = ListProperty([])
    trenches = ListProperty([])
    points = ListProperty([])
    cautions = StringProperty("")
    residuals = StringProperty("")
    gnss = StringProperty("no receiver read yet")
    setup_state = StringProperty("No instrument setup accepted today.")
    heat_state = StringProperty("")
    instrument_line = StringProperty("")  # the active line template and the last line read, raw and decoded
    download_state = StringProperty("")  # what the last attached download wrote

    def refresh(self) -> None:
        self.instrument_line = self.app.shot_feed.status()
        days = self.app.days
        sites = days.sites()
        self.sites = [s.code for s in sites]
        ids = self.ids
        if ids.site.text not in self.sites and self.sites:
            ids.site.text = self.sites[0]
        site = next((s for s in sites if s.code == ids.site.text), None)
        self.seasons = [s.label for s in days.seasons(site)] if site else []
        self.trenches = [t.code for t in days.trenches(site)] if site else []
        if days.day is not None:
            ids.season.text, ids.trench.text = days.day.season.label, days.day.trench.code
            ids.recorder.text = days.day.recorder
            self.points = [NONE, *(p.code for p in days.control_points())]
            if days.day.setup is not None:
                self.setup_state = f"Setup accepted: station {days.day.setup.station_code}."
            self._heat_line()
        else:
            if ids.season.text not in self.seasons and self.seasons:
                ids.season.text = self.seasons[-1]
        if not self.sites:
            self.message = "This tablet holds no site yet: enrol and sync on the Camp screen first."

    def start_day(self) -> None:
        ids = self.ids
        day = self.guard(self.app.days.start, site_code=ids.site.text, season_label=ids.season.text,
                         trench_code=ids.trench.text, recorder=ids.recorder.text.strip().upper())
        if day is None:
            return
        self.cautions = "\n\n".join(f"{c.title.upper()}: {c.text}" for c in self.app.days.day_cautions())
        self.message = f"Day started: {day.site.code} {day.season.label}, trench {day.trench.code}, {day.recorder}."
        self.ids.heat_by.text = day.recorder
        self.refresh()

    def acknowledge_heat(self) -> None:
        check = self.guard(self.app.days.acknowledge_heat, by=self.ids.heat_by.text)
        if check is not None:
            self.refresh()

    def _heat_line(self) -> None:
        done = self.app.days.heat_acknowledged()
        tz = self.app.days.day.tz
        self.heat_state = (f"Heat caution acknowledged at {done.checked_at.astimezone(tz):%H:%M} ({done.answer})." if done
                           else "HEAT: not acknowledged yet today.")

    def read_backsight(self, row: int) -> None:
        ids = self.ids
        target = ids[f"bs{row}_point"].text
        if NONE in (target, ids.station.text) and ids.method.text == "on a point":
            self.problem = "PROBLEM: choose the occupied point and this row's point first"
            return
        line = self.guard(self.app.read_backsight_line, ids.station.text, target)
        self.instrument_line = self.app.shot_feed.status()
        if line:
            ids[f"bs{row}_line"].text = line
        elif line is None and self.problem == "":
            self.problem = "PROBLEM: no line from the instrument yet; take the reading again or type it"

    def _rows(self) -> list[tuple[str, str]]:
        ids = self.ids
        return [(ids[f"bs{i}_point"].text, ids[f"bs{i}_line"].text) for i in (1, 2, 3)
                if ids[f"bs{i}_point"].text not in ("", NONE) and ids[f"bs{i}_line"].text.strip()]

    def compute_setup(self) -> None:
        ids = self.ids
        try:
            ih = float(ids.ih.text.replace(",", "."))
        except ValueError:
            self.problem = "PROBLEM: instrument height: type it in metres, e.g. 1.552"
            return
        if ids.method.text == "on a point":
            review = self.guard(self.app.days.set_up_on_point, station=ids.station.text, backsights=self._rows(),
                                instrument_height_m=ih)
        else:
            review = self.guard(self.app.days.set_up_free_station, code=ids.free_code.text.strip() or "FS",
                                observations=self._rows(), instrument_height_m=ih)
        if review is not None:
            warn = "".join(f"\nWARNING: {w}" for w in review.warnings)
            self.residuals = "Residuals:\n" + "\n".join(review.lines) + warn
            self.setup_state = "Check the residuals, then accept."

    def accept_setup(self) -> None:
        setup = self.guard(self.app.days.accept_setup, laser_acknowledged_by=self.ids.laser_by.text)
        if setup is not None:
            self.setup_state = f"Setup accepted: station {setup.station_code}. Shots can be taken."

    def attach_download(self) -> None:
        """The dialog that attaches the instrument's own download to this tablet's finds (today's setup first)."""
        from ..attach import AttachDialog, attach_controller

        if self.guard(self.app.days.require_setup) is None:
            return
        self.dialog = AttachDialog(attach_controller(self.app), self.app.template, self._attached)
        self.dialog.open()

    def _attached(self, saved: list[Any]) -> None:
        open_checks = sorted({i.code for s in saved for i in s.issues if i.severity != "info"})
        self.download_state = (f"Attached {len(saved)} point{'' if len(saved) == 1 else 's'} to finds "
                        f"{', '.join(str(s.find.number) for s in saved)}."
                        + (f" Checks now open: {', '.join(open_checks)} (see Finds)." if open_checks else ""))

    def take_photo(self, what: str) -> None:
        """The photo dialog for today's trench or the day's work (``what``: trench or day)."""
        from ..photo import PhotoDialog, photo_controller

        photos = photo_controller(self.app)
        target = self.guard(photos.of_trench if what == "trench" else photos.of_day)
        if target is not None:
            self.dialog = PhotoDialog(photos, target, lambda photo: setattr(
                self, "message", f"Photo P{photo.number} of {target.label} kept."))
            self.dialog.open()

    def read_receiver(self) -> None:
        status = self.guard(self.app.read_receiver)
        if status:
            self.gnss = status

    def theme(self, name: str) -> Any:
        self.app.set_theme(name)
