"""The tablet app: a bar of six buttons that is always on screen (so nothing is more than two taps from
Record) over the screens, each created the first time it is shown. ``baulk tablet`` starts it.

Kivy reads its settings when first imported: set ``KIVY_NO_ARGS=1`` (the ``baulk`` command does) so that it
leaves the command line alone.
"""

from __future__ import annotations

import importlib
from pathlib import Path
from typing import Any

DESKTOP_SIZE = (1280, 800)  # a 10-inch tablet in landscape, for the desktop window


def _desktop_size_before_the_window() -> None:
    """On a desktop, ask for a tablet-sized first window instead of Kivy's 800 x 600 default. This must run before
    Kivy makes its window (the import of ``kivy.core.window`` below): a window resized later keeps an 800 x 600
    drawing surface on some systems (the offscreen EGL one the tests use). A size set in Kivy's own configuration
    (config.ini, ``KCFG_GRAPHICS_WIDTH``), as the UI tests set a portrait window, is left alone."""
    from kivy.config import Config
    from kivy.utils import platform

    if platform in ("linux", "win", "macosx") and (Config.getint("graphics", "width"),
                                                    Config.getint("graphics", "height")) == (800, 600):
        Config.set("graphics", "width", str(DESKTOP_SIZE[0]))
        Config.set("graphics", "height", str(DESKTOP_SIZE[1]))


_desktop_size_before_the_window()

from kivy.app import App  # noqa: E402 - after the size is chosen
from kivy.core.window import Window  # noqa: E402
from kivy.properties import ListProperty, StringProperty
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.screenmanager import ScreenManager

from schema.records import LevelPoint

from .. import controllers as c
from ..instruments import FieldSimulator, ShotFeed, TtyPort, record_ends
from ..store import TabletStore
from . import theme
from .widgets import load_kv

__all__ = ["SCREENS", "TabletApp"]

HERE = Path(__file__).parent
IDLE_CHECKPOINT_S = 30  # copy the write-ahead log back into the tablet file between saves (see TabletStore)

# screen name -> (button text, module, class); the bar shows them in this order
SCREENS: dict[str, tuple[str, str, str]] = {
    "day": ("Day", "mobile.ui.screens.day", "DayScreen"),
    "record": ("Record", "mobile.ui.screens.record", "RecordScreen"),
    "units": ("Units", "mobile.ui.screens.units", "UnitsScreen"),
    "finds": ("Finds", "mobile.ui.screens.finds", "FindsScreen"),
    "labels": ("Labels", "mobile.ui.screens.labels", "LabelsScreen"),
    "link": ("Camp", "mobile.ui.screens.link", "LinkScreen"),
}


def _tablet_sized_window() -> None:
    """On a desktop, open at a tablet's size rather than Kivy's 800 x 600 default (a size set in Kivy's own
    configuration, as the tests do, is left alone)."""
    from kivy.config import Config
    from kivy.utils import platform

    if platform in ("linux", "win", "macosx") and (Config.getint("graphics", "width"),
                                                    Config.getint("graphics", "height")) == (800, 600):
        Window.size = DESKTOP_SIZE


class Shell(BoxLayout):
    """The bar and the screen manager."""

    current = StringProperty("day")

    def show(self, name: str) -> Any:
        manager: ScreenManager = self.ids.manager
        if not manager.has_screen(name):
            _label, module, cls = SCREENS[name]
            mod = importlib.import_module(module)
            load_kv(Path(mod.__file__).with_suffix(".kv"))  # type: ignore[arg-type]
            manager.add_widget(getattr(mod, cls)(name=name))
        manager.current = name
        self.current = name
        return manager.get_screen(name)


class TabletApp(App):
    """The Baulk tablet app over one tablet file."""

    title = "Baulk"
    bg = ListProperty(theme.THEMES["sun"]["bg"])
    fg = ListProperty(theme.THEMES["sun"]["fg"])
    button = ListProperty(theme.THEMES["sun"]["button"])
    button_fg = ListProperty(theme.THEMES["sun"]["button_fg"])
    field = ListProperty(theme.THEMES["sun"]["field"])
    accent = ListProperty(theme.THEMES["sun"]["accent"])
    alarm = ListProperty(theme.THEMES["sun"]["alarm"])
    chosen = ListProperty(theme.THEMES["sun"]["chosen"])
    muted = ListProperty(theme.THEMES["sun"]["muted"])
    selected = ListProperty(theme.THEMES["sun"]["selected"])

    def __init__(self, *, store_path: Path, simulate: bool = False, instrument: str | None = None,
                 receiver: str | None = None, labels_dir: Path | None = None, laser_class: str = "see the instrument's label",
                 template: Any = None, **kw: Any):
        super().__init__(**kw)
        self.store_path = Path(store_path)
        self.labels_dir = Path(labels_dir) if labels_dir else self.store_path.parent / "labels"
        self._template = template  # --template: chosen now, remembered by the tablet file (see build)
        self._simulate = simulate
        self._instrument_path, self._receiver_path = instrument, receiver
        self.laser_class = laser_class

    # -- life cycle ---------------------------------------------------------------------------------------
    def build(self) -> Shell:
        self.store = TabletStore.open(self.store_path)
        from ..settings import TabletSettings

        self.days = c.DayController(self.store, laser_class=self.laser_class,
                                    gnss_max_age_s=TabletSettings().gnss_max_age_s, template=self._template)
        self.template = self.days.template  # the given one, else the one the tablet file remembers, else BKS
        self.shot_feed = ShotFeed(self.template)  # the last line read, raw and decoded, for the Day screen
        self.simulator = FieldSimulator(template=self.template) if self._simulate else None
        self.instrument = TtyPort(self._instrument_path, ends=record_ends(self.template)) if self._instrument_path else None
        self.receiver = TtyPort(self._receiver_path) if self._receiver_path else None
        self.finds = c.FindController(self.store, self.days)
        self.units = c.UnitsController(self.store, self.days)
        self.labels = c.LabelQueue(self.store)
        self.link = c.CampLink(self.store)
        load_kv(HERE / "widgets.kv")
        load_kv(HERE / "app.kv")
        Window.clearcolor = self.bg
        _tablet_sized_window()
        shell = Shell()
        from kivy.clock import Clock

        Clock.schedule_interval(lambda _dt: self.store.checkpoint(), IDLE_CHECKPOINT_S)
        day = self.days.resume()
        shell.show("record" if day is not None and day.unit is not None else "day")
        return shell

    def on_stop(self) -> None:
        for port in (self.instrument, self.receiver):
            if port is not None:
                port.close()
        self.store.checkpoint()
        self.store.close()

    def on_pause(self) -> bool:
        """Android sends the app to the background: copy the log back while nothing is being saved."""
        self.store.checkpoint()
        return True

    def go(self, name: str) -> Any:
        return self.root.show(name)

    def set_theme(self, name: str) -> None:
        for key, value in theme.THEMES[name].items():
            setattr(self, key, value)
        Window.clearcolor = self.bg

    @property
    def listing(self) -> c.FindListController:
        day = self.days.day
        return c.FindListController(self.store, timezone=day.site.timezone if day else "UTC")

    # -- instruments ----------------------------------------------------------------------------------------
    def read_shot_line(self) -> str | None:
        """The latest shot line from the instrument (or the simulator, aimed inside the current unit)."""
        if self.simulator is not None:
            return self.shot_feed.take([self.simulator.shot_line(self.days.require_setup(), self.simulated_point())])
        if self.instrument is not None:
            return self.shot_feed.take(self.instrument.lines())  # the newest line, or why it cannot be read
        return None

    def read_backsight_line(self, station_code: str, target_code: str) -> str | None:
        if self.simulator is None:
            return self.read_shot_line() if self.instrument is not None else None
        points = {p.code: p for p in self.days.control_points()}
        return self.shot_feed.take([self.simulator.backsight_line(points[station_code], points[target_code])])

    def read_receiver(self) -> str:
        """Feed the receiver's (or the simulator's) latest sentences to the GNSS monitor; returns its status."""
        if self.simulator is not None:
            lines = self.simulator.gnss_lines(self.days.require_day().site, self.simulated_point())
        elif self.receiver is not None:
            lines = self.receiver.lines()
        else:
            lines = []
        return self.days.feed_gnss(lines)

    def simulated_point(self) -> tuple[float, float, float]:
        day = self.days.require_day()
        levels = self.store.list(LevelPoint, unit_id=day.unit.id) if day.unit else []
        tops = [p.z for p in levels if p.surface == "top"] or [100.0]
        bottoms = [p.z for p in levels if p.surface == "bottom"] or [min(tops) - 0.2]
        assert self.simulator is not None
        return self.simulator.target(day.trench.outline, sum(tops) / len(tops), sum(bottoms) / len(bottoms))
