"""Real Kivy windows for the ``ui`` tests: SDL2 with no display falls back to an offscreen EGL window (Mesa
llvmpipe), so a real window renders and ``Window.screenshot`` works without Xvfb. Kivy reads its environment
when first imported, so it is set here, before any test module imports Kivy: no command-line parsing, a
temporary KIVY_HOME, a portrait 800 x 1280 tablet window.

The app is started as ``App.run`` starts it (``_run_prepare``: build, add to the window, ``on_start``) but the
test drives the event loop itself, frame by frame, and touches widgets with real touch events.
Screenshots go to ``test-output/ui/`` (``BAULK_UI_SHOTS`` to change), kept as the run's artifacts.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Any, Iterator

import pytest

os.environ.setdefault("KIVY_NO_ARGS", "1")
os.environ.setdefault("KIVY_NO_CONSOLELOG", "1")
os.environ.setdefault("KIVY_NO_FILELOG", "1")
os.environ["KIVY_HOME"] = tempfile.mkdtemp(prefix="baulk-kivy-")

SHOTS = Path(os.environ.get("BAULK_UI_SHOTS", Path(__file__).resolve().parents[2] / "test-output" / "ui"))


def _kivy() -> Any:
    try:
        from kivy.config import Config
    except ImportError as exc:  # pragma: no cover - the test extra installs Kivy
        pytest.skip(f"Kivy is not installed ({exc}); pip install -e '.[test]'")
    Config.set("graphics", "width", "800")
    Config.set("graphics", "height", "1280")
    Config.set("kivy", "exit_on_escape", "0")
    from kivy.base import EventLoop

    EventLoop.ensure_window()
    if EventLoop.window is None:
        pytest.skip("no window could be created (SDL2/EGL)")
    return EventLoop


@pytest.fixture
def shots() -> Path:
    SHOTS.mkdir(parents=True, exist_ok=True)
    return SHOTS


@pytest.fixture
def run_app(tmp_path: Path) -> Iterator[Any]:
    """Start the tablet app on a tablet file; yields a function (store path, **options) -> driver."""
    loop = _kivy()
    started: list[Any] = []

    def start(store_path: Path, **options: Any) -> Any:
        from mobile.ui.app import TabletApp
        from tests.ui.driver import Driver

        app = TabletApp(store_path=store_path, labels_dir=tmp_path / "labels", laser_class="3R", **options)
        app._run_prepare()
        started.append(app)
        driver = Driver(app, loop)
        driver.pump(5)
        return driver

    yield start
    for app in started:
        app.dispatch("on_stop")
        window = loop.window
        for child in list(window.children):
            window.remove_widget(child)
        from kivy.app import App

        App._running_app = None
