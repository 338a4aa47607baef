"""Survey input a data manager may get wrong (issue 15, item 8): every number finite, every id once, a projected
CRS, a log that holds NMEA, a setup that is JSON text; and a control file without heights, as README allows."""

from __future__ import annotations

import json
import math
from functools import reduce
from pathlib import Path

import pytest
from click.testing import CliRunner

from schema.errors import ObservationInvalid
from schema.survey import gnss, polar
from sync_server.cli import cli

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "survey"
CONTROL, OBSERVATIONS = EXAMPLES / "control.csv", EXAMPLES / "observations.csv"
SETUP, SHOTS, ROVER = EXAMPLES / "setup.json", EXAMPLES / "shots.csv", EXAMPLES / "rover.nmea"
CRS_FIX = ("give the projected CRS the site is mapped in, e.g. the UTM zone of the site (32736 is WGS 84 / UTM "
           "zone 36S)")


def run(*args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, ["survey", *args], catch_exceptions=False)
    return result.exit_code, result.output


def _without_z(tmp_path: Path) -> Path:
    rows = [line.split(",")[:3] for line in CONTROL.read_text().splitlines()]
    path = tmp_path / "control.csv"
    path.write_text("\n".join(",".join(r) for r in rows) + "\n")
    return path


def test_control_points_without_heights_give_a_station_without_z(tmp_path: Path) -> None:
    control = _without_z(tmp_path)
    assert control.read_text().startswith("code,e,n\nCP1,995.000,1990.000\n")
    code, out = run("resect", str(control), str(OBSERVATIONS), "--instrument-height", "1.48", "--format", "json")
    assert code == 0, out
    r = json.loads(out)
    _, full = run("resect", str(CONTROL), str(OBSERVATIONS), "--instrument-height", "1.48", "--format", "json")
    assert (r["e"], r["n"]) == (json.loads(full)["e"], json.loads(full)["n"])
    assert (r["z"], r["sd_z"]) == (None, None)
    assert r["warnings"] == ["no control point has a height (z), so the station has no Z; give the control points' "
                             "z to get one"]
    code, table = run("resect", str(control), str(OBSERVATIONS), "--instrument-height", "1.48")
    assert code == 0 and table.startswith("station  E 1010.0000  N 1997.9995  Z -\n")
    assert table.endswith("warning: no control point has a height (z), so the station has no Z; give the control "
                          "points' z to get one\n")


@pytest.mark.parametrize(("epsg", "what"), [
    ("4326", "EPSG:4326 (WGS 84) is a geographic CRS"),
    ("4978", "EPSG:4978 (WGS 84) is a geocentric CRS"),
])
def test_nmea_refuses_a_crs_that_is_not_projected(epsg: str, what: str) -> None:
    code, out = run("nmea", str(ROVER), "--epsg", epsg)
    assert (code, out) == (1, f"Error: --epsg {epsg}: {what}, not a projected one; {CRS_FIX}\n")


def test_nmea_still_projects_into_a_projected_crs() -> None:
    code, out = run("nmea", str(ROVER), "--epsg", "32736", "--format", "json")
    assert code == 0 and json.loads(out)["fixes"][0]["e"] == pytest.approx(802510.894, abs=0.001)


def _setup(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "setup.json"
    path.write_text(text)
    return path


@pytest.mark.parametrize(("replace", "line", "message"), [
    (('"z": 100.512', '"z": NaN'), 1, "z nan is not a finite number; give the height of the ground mark in metres"),
    (('"instrument_height": 1.552', '"instrument_height": Infinity'), 1,
     "instrument_height inf is not a finite number; give the instrument's height above the ground mark in metres"),
    (('"orientation": 71.4215', '"orientation": -Infinity'), 2,
     "orientation -inf is not a finite number; give the grid bearing of the zero reading, in the angle unit"),
    (('"e": 995.000', '"e": true'), 1, "e True is not a number; give the station's grid easting in metres"),
])
def test_setup_numbers_must_be_finite(tmp_path: Path, replace: tuple[str, str], line: int, message: str) -> None:
    setup = _setup(tmp_path, SETUP.read_text().replace(*replace))
    code, out = run("reduce", str(setup), str(SHOTS))
    assert (code, out) == (1, f"Error: {setup} line {line}: {message} as a JSON number\n")


@pytest.mark.parametrize(("option", "value", "message"), [
    ("--instrument-height", "nan",
     "instrument height nan is not a finite number; give the instrument's height above the ground mark in metres"),
    ("--instrument-height", "inf",
     "instrument height inf is not a finite number; give the instrument's height above the ground mark in metres"),
    ("--tolerance", "nan", "tolerance nan is not a finite number; give the largest residual to accept, in metres "
                           "(e.g. 0.01)"),
])
def test_resect_options_must_be_finite(option: str, value: str, message: str) -> None:
    args = ["--instrument-height", "1.48", option, value] if option == "--tolerance" else [option, value]
    code, out = run("resect", str(CONTROL), str(OBSERVATIONS), *args)
    assert (code, out) == (1, f"Error: {message}\n")


def test_a_csv_number_must_be_finite(tmp_path: Path) -> None:
    shots = tmp_path / "shots.csv"
    shots.write_text(SHOTS.read_text().replace("F-0002,325.9471", "F-0002,nan"))
    assert run("reduce", str(SETUP), str(shots)) == (1, f"Error: {shots} line 3: hz 'nan' is not a finite number\n")


def test_the_engine_refuses_a_station_that_is_not_finite() -> None:
    station = polar.Station(995.0, 1990.0, math.nan, 1.552, 71.4215)
    with pytest.raises(ObservationInvalid) as exc:
        polar.reduce_shots(station, 10.0, 90.0, 5.0, 1.3)
    assert str(exc.value) == "station z nan is not a finite number; give the height of the ground mark in metres"


@pytest.mark.parametrize(("name", "header", "rows", "args", "message"), [
    ("shots.csv", "id,hz,zenith,slope_distance,target_height",
     ["F-1,10,90,5,1.3", "F-2,20,90,5,1.3", "F-1,30,90,5,1.3"], lambda p: ["reduce", str(SETUP), str(p)],
     "line 4: id 'F-1' is already used on line 2; each row needs its own id: rename or remove one of them"),
    ("control.csv", "code,e,n,z", ["CP1,995,1990,100", "CP2,1030,1992,99", "CP2,1012,2020,100"],
     lambda p: ["resect", str(p), str(OBSERVATIONS), "--instrument-height", "1.48"],
     "line 4: code 'CP2' is already used on line 3; each row needs its own code: rename or remove one of them"),
])
def test_ids_are_used_once(tmp_path: Path, name: str, header: str, rows: list[str], args, message: str) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / name
    path.write_text("\n".join([header, *rows]) + "\n")
    assert run(*args(path)) == (1, f"Error: {path} {message}\n")


@pytest.mark.parametrize(("content", "what"), [
    ("", "the file is empty"),
    ("\n\n", "the file is empty"),
    (SHOTS.read_text(), "none of its 5 lines starts with $ as a sentence does, e.g. $GNGGA,..."),
])
def test_nmea_on_a_file_without_sentences_fails(tmp_path: Path, content: str, what: str) -> None:
    log = tmp_path / "rover.nmea"
    log.write_text(content)
    assert run("nmea", str(log)) == (1, f"Error: {log}: no NMEA sentence was found ({what}); give the receiver's log "
                                        "of NMEA 0183 sentences (GGA, RMC, GST), copied as plain text\n")


def _sentence(body: str) -> str:
    return "$%s*%02X" % (body, reduce(lambda a, c: a ^ ord(c), body, 0))


@pytest.mark.parametrize(("body", "reason"), [
    ("GPGGA,081511.00,0234.9754,S,03543.2186,E,4,12,0.6,nan,M,27.4,M,1.0,0000", "altitude 'nan' is not a finite number"),
    ("GPGGA,081511.00,0234.9754,S,03543.2186,E,4,12,inf,1160.5,M,27.4,M,1.0,0000", "HDOP 'inf' is not a finite number"),
    ("GPGGA,081511.00,0234.9754,S,03543.2186,E,x,12,0.6,1160.5,M,27.4,M,1.0,0000", "fix quality 'x' is not a whole number"),
    ("GPGGA,081511.00,9934.9754,S,03543.2186,E,4,12,0.6,1160.5,M,27.4,M,1.0,0000",
     "position 9934.9754,S 03543.2186,E is not a latitude and longitude"),
    ("GPGST,081511.00,0.5,0.01,0.01,10,NaN,0.01,0.02", "latitude sigma 'nan' is not a finite number"),
    ("GPRMC,081511.00,A,0234.9754,S,03543.2186,E,0.0,0.0,991399,,,A", "date '991399' is not a date (DDMMYY)"),
])
def test_a_sentence_with_a_number_that_is_not_finite_is_rejected(body: str, reason: str) -> None:
    log = gnss.parse_nmea([_sentence(body)])
    assert log.fixes == []
    assert [(r.line, r.reason) for r in log.rejected] == [(1, f"{reason}; the sentence cannot be used, re-read it")]


@pytest.mark.parametrize("junk", [bytes(range(256)) * 4, b"\x00" * 64])
def test_binary_setup_is_not_a_json_text_file(tmp_path: Path, junk: bytes) -> None:
    setup = tmp_path / "setup.json"
    setup.write_bytes(junk)
    assert run("reduce", str(setup), str(SHOTS)) == (
        1, f"Error: {setup}: not a JSON text file (it is binary, not UTF-8 text); save it again as JSON text (UTF-8)\n")
