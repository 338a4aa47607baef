"""`baulk tablet --instrument DEV --template FILE` through the real command, in a fresh process (issue 21): the
instrument's line arrives on the device file and is read through the template, the tablet file remembers the
template, and the next start without --template reads with it (Day shows it)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.ui

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "instruments"
LINE = "1012;123.45305;-2.30000;12345;1.300;-30*B1"  # README's worked example of delimited.toml

PROBE = '''
import json, sys
from kivy.clock import Clock

def look(_dt):
    from kivy.app import App
    app = App.get_running_app()
    seen = {"template": app.template.name}
    if app.instrument is not None:
        seen["line"] = app.read_shot_line()
    day = app.root.ids.manager.get_screen("day")
    day.refresh()  # as each time Day is shown
    seen["day"] = day.instrument_line
    with open(sys.argv[1], "w") as fh:
        json.dump(seen, fh)
    app.stop()

Clock.schedule_once(look, 2)
from sync_server.cli import cli
cli(["tablet", "--store", sys.argv[2], *sys.argv[3:]], standalone_mode=False)
'''


def _run(tmp_path: Path, *args: str) -> dict[str, str]:
    script = tmp_path / "probe.py"
    script.write_text(PROBE)
    out = tmp_path / "seen.json"
    out.unlink(missing_ok=True)
    env = {**os.environ, "KIVY_NO_ARGS": "1", "KIVY_HOME": str(tmp_path / "kivy"), "KIVY_NO_CONSOLELOG": "1",
           "KIVY_NO_FILELOG": "1"}
    run = subprocess.run([sys.executable, str(script), str(out), str(tmp_path / "tablet.sqlite"), *args], env=env,
                         cwd=tmp_path, capture_output=True, text=True, timeout=180)
    if not out.exists():
        pytest.fail(f"the tablet app did not report (exit {run.returncode}): {run.stderr[-2000:]}")
    return json.loads(out.read_text())  # type: ignore[no-any-return]


def test_the_command_reads_the_device_through_the_template_and_the_tablet_remembers_it(tmp_path: Path) -> None:
    device = tmp_path / "rfcomm0"  # a device file the system would show; here a file holding what was sent
    device.write_bytes((LINE + "\r\n").encode("ascii"))
    first = _run(tmp_path, "--instrument", str(device), "--template", str(EXAMPLES / "delimited.toml"))
    assert (first["template"], first["line"]) == ("semicolon-dms", LINE)
    # 123 deg 45' 30.5" = 123.758472 deg, shown to 4 decimals; vertical angle -2 deg 30' = zenith 92.5 deg
    assert first["day"].splitlines() == [
        f"Instrument template: semicolon-dms (delimited, {EXAMPLES / 'delimited.toml'})", f"Last line: {LINE}",
        "Read as: point 1012, hz 123.7585 deg, zenith 92.5000 deg, slope distance 12.3450 m, target height "
        "1.300 m, prism constant -30 mm"]
    again = _run(tmp_path)  # no --template: the one the tablet file remembers
    assert again["template"] == "semicolon-dms"
    assert again["day"].splitlines()[0] == f"Instrument template: semicolon-dms (delimited, {EXAMPLES / 'delimited.toml'})"
    assert _run(tmp_path, "--template", "bks")["template"] == "bks"  # chosen again
