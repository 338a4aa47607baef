"""``baulk survey``: the README's worked examples run as written, JSON keys scripts rely on, clear errors."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from click.testing import CliRunner

from sync_server.cli import cli

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "survey"


def run(*args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, ["survey", *args], catch_exceptions=False)
    return result.exit_code, result.output


def test_reduce_example() -> None:
    code, out = run("reduce", str(EXAMPLES / "setup.json"), str(EXAMPLES / "shots.csv"), "--format", "json")
    assert code == 0
    points = json.loads(out)
    assert [p["id"] for p in points] == ["F-0001", "F-0002", "F-0003", "LP-101-T1"]
    assert {"id", "e", "n", "z"} <= set(points[0])
    # the example readings were made from these coordinates (rounded to 0.1 mgon-ish readings and 1 mm)
    assert (points[0]["e"], points[0]["n"], points[0]["z"]) == pytest.approx((1001.204, 2001.377, 99.812), abs=0.001)


def test_resect_example() -> None:
    code, out = run("resect", str(EXAMPLES / "control.csv"), str(EXAMPLES / "observations.csv"),
                    "--instrument-height", "1.48", "--format", "json")
    assert code == 0
    r = json.loads(out)
    assert {"e", "n", "z", "orientation_deg", "scale", "residuals", "warnings"} <= set(r)
    # the readings were simulated from a station at (1010.000, 1998.000, 100.200), orientation 47.25 deg,
    # with 1 mm of noise on each target
    assert math.hypot(r["e"] - 1010.0, r["n"] - 1998.0) < 0.003
    assert r["orientation_deg"] == pytest.approx(47.25, abs=0.01)
    assert r["warnings"] == []


def test_resect_refuses_over_tolerance() -> None:
    code, out = run("resect", str(EXAMPLES / "control.csv"), str(EXAMPLES / "observations.csv"),
                    "--instrument-height", "1.48", "--tolerance", "0.0001")
    assert code == 1 and out.startswith("Error: free station refused: control point ")


def test_fit_grid_example() -> None:
    code, out = run("fit-grid", str(EXAMPLES / "grid_pairs.csv"), "--format", "json")
    assert code == 0
    r = json.loads(out)
    assert {"rotation_deg", "scale", "e0", "n0", "residuals"} <= set(r)
    # pairs were made with rotation -8.2 deg, scale 0.99996, origin (801234.5, 9712345.6), 2 mm noise
    assert r["rotation_deg"] == pytest.approx(-8.2, abs=0.01)
    assert r["vertical_offset_m"] == pytest.approx(-1187.42, abs=1e-6)


def test_nmea_example() -> None:
    code, out = run("nmea", str(EXAMPLES / "rover.nmea"), "--epsg", "32736", "--format", "json")
    assert code == 0
    r = json.loads(out)
    assert [f["quality"] for f in r["fixes"]] == [4, 4, 5]
    assert {"lat", "lon", "h", "quality", "e", "n"} <= set(r["fixes"][0])
    assert [f["plot_ok"] for f in r["fixes"]] == [True, True, False]
    assert [x["line"] for x in r["rejected"]] == [5]
    assert r["rejected"][0]["reason"].startswith("bad checksum")


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("id,hz,zenith\nA,1,90\n", "missing columns slope_distance, target_height; the header must name id, hz, "
                                   "zenith, slope_distance, target_height (found: id, hz, zenith)"),
        ("id,hz,zenith,slope_distance,target_height\nA,1,9o,5,1.5\n",
         "line 2: zenith '9o' is not a number; use a decimal point, e.g. 12.345"),
        ("id,hz,zenith,slope_distance,target_height\n", "no data rows under the header"),
    ],
)
def test_bad_shot_files_name_line_and_column(tmp_path: Path, content: str, message: str) -> None:
    shots = tmp_path / "shots.csv"
    shots.write_text(content)
    code, out = run("reduce", str(EXAMPLES / "setup.json"), str(shots))
    assert code == 1
    assert out == f"Error: {shots}{':' if not message.startswith('line') else ''} {message}\n"


def test_setup_file_missing_keys(tmp_path: Path) -> None:
    setup = tmp_path / "setup.json"
    setup.write_text('{"e": 1, "n": 2}')
    code, out = run("reduce", str(setup), str(EXAMPLES / "shots.csv"))
    assert code == 1
    assert out == (f"Error: {setup}: the setup needs e, n, z, instrument_height, orientation (and angle_unit "
                   "'deg' or 'gon'); missing z, instrument_height, orientation\n")
