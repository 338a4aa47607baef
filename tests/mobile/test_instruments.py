"""Instrument input: the line reader over a byte stream, the BKS shot line and the GNSS monitor."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import pytest

from mobile.instruments import GnssMonitor, LineReader, format_shot_line, parse_shot_line, shot_checksum, stream_lines
from mobile.recording import Reading
from schema.errors import InstrumentLineInvalid

# The NMEA 0183 GGA example widely published with its checksum (the one tests/schema/survey/test_gnss.py uses).
GGA = "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47"


class Chunks:
    """A serial port that hands out bytes in awkward pieces."""

    def __init__(self, data: bytes, size: int):
        self.data, self.size = data, size

    def read(self, n: int) -> bytes:
        out, self.data = self.data[: min(n, self.size)], self.data[min(n, self.size):]
        return out


def test_lines_across_chunk_boundaries_and_mixed_line_ends() -> None:
    data = b"BKS,1,a\r\nsecond\nthird\r" + b"fourth-no-end"
    reader = LineReader(Chunks(data, 3))
    got: list[str] = []
    for _ in range(20):
        got += reader.poll()
    assert got == ["BKS,1,a", "second", "third"]
    assert reader.feed(b"\n") == ["fourth-no-end"]


def test_noise_is_dropped_and_reported() -> None:
    reader = LineReader()
    assert reader.feed(b"\xff\xfe garbage\r\nok\r\n") == ["ok"]
    assert reader.dropped[0].startswith("a line with non-ASCII bytes was dropped")
    assert reader.feed(b"x" * 600) == []
    assert reader.dropped[-1] == "600 bytes without a line end were dropped"


def test_shot_line_round_trip_and_the_documented_example() -> None:
    r = Reading(123.4567, 91.2345, 12.3456, 1.3, dt.datetime(2026, 7, 3, tzinfo=dt.timezone.utc))
    line = format_shot_line(r, angle_unit="gon")
    back, unit = parse_shot_line(line)
    assert (back.hz, back.zenith, back.slope_distance_m, back.target_height_m, unit) == (123.4567, 91.2345, 12.3456, 1.3, "gon")
    assert back.raw_line == line
    # the example in mobile/instruments.py's docstring; the checksum checked by an independent XOR here
    body = "BKS,1,45.0000,90.0000,5.0000,1.500,0,deg"
    x = 0
    for ch in body.encode():
        x ^= ch
    assert shot_checksum(body) == f"{x:02X}" == "28"
    assert parse_shot_line(body + "*28")[0].slope_distance_m == 5.0


@pytest.mark.parametrize("line, message", [
    ("XYZ,1,2", "does not hold 'BKS' at column 1, so it is not a line of this template"),
    ("BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*00", "has a wrong checksum ('00', expected 28)"),
    ("BKS,1,45,90,5,1.5,0,deg", "has no checksum (no '*' before it)"),
    ("BKS,2,45,90,5,1.5,0,deg", "does not hold '1' at column 2, so it is not a line of this template"),
    ("BKS,1,45,ninety,5,1.5,0,deg", "bks: the zenith angle (column 4) is 'ninety': not a number (read as degrees)"),
    ("BKS,1,45,90,5,1.5,0,rad", "bks: the angle unit (column 8) 'rad' is not deg, gon, dms or mil"),
    ("BKS,1,370,90,5,1.5,0,deg", "bks: the horizontal reading (column 3) '370' is outside one turn"),
    ("BKS,1,45,90,0,1.5,0,deg", "bks: the slope distance (column 5) '0' is not between 0 and 2000 m"),
    ("BKS,1,45,90,5,12,0,deg", "bks: the target height (column 6) '12' is not between 0 and 10 m"),
])
def test_bad_shot_lines_name_the_problem(line: str, message: str) -> None:
    if "*" not in line and "no checksum" not in message:
        line = f"{line}*{shot_checksum(line)}"
    with pytest.raises(InstrumentLineInvalid) as exc:
        parse_shot_line(line)
    assert message in str(exc.value)


def test_gnss_monitor_reads_epochs_from_a_stream() -> None:
    monitor = GnssMonitor()
    assert monitor.status() == "no fix yet"
    reader = LineReader()
    got = []
    for chunk in stream_lines([GGA, GGA]):
        got += reader.feed(chunk)
    monitor.feed(got)
    monitor.flush()
    assert monitor.latest is not None and monitor.latest.quality == 1
    assert monitor.latest.lat == pytest.approx(48 + 7.038 / 60)
    assert monitor.status() == "autonomous GNSS, HDOP 0.9, sigma N/E/h ?/?/? cm"
    kept = monitor.latest
    monitor.feed([GGA[:-2] + "00"])
    monitor.flush()
    assert monitor.latest is kept  # a bad epoch never replaces the last good fix
    assert monitor.rejected[0].startswith("line 1:") and "checksum" in monitor.rejected[0]


def test_typed_readings_become_a_checked_line() -> None:
    from mobile.instruments import typed_shot_line

    line = typed_shot_line("123,4567", "91.2", "12.5", "1.3", angle_unit="gon")
    reading, unit = parse_shot_line(line)
    assert (reading.hz, reading.zenith, reading.slope_distance_m, reading.target_height_m, unit) == (123.4567, 91.2, 12.5, 1.3, "gon")
    with pytest.raises(InstrumentLineInvalid, match="the slope distance 'twelve' is not a number"):
        typed_shot_line("1", "90", "twelve", "1.3", angle_unit="deg")
    with pytest.raises(InstrumentLineInvalid, match=r"the zenith angle \(column 4\) '0.0000' is outside 0-360 deg"):
        typed_shot_line("1", "0", "12", "1.3", angle_unit="deg")


# -- instrument line templates on the tablet -------------------------------------------------------------------
EXAMPLE_TEMPLATES = Path(__file__).resolve().parents[2] / "examples" / "instruments"


def _templates() -> list[Any]:
    from schema.survey import templates as tp

    return [tp.BKS, tp.CSV, *(tp.load_template(EXAMPLE_TEMPLATES / f"{n}.toml") for n in ("delimited", "fixed", "words"))]


@pytest.mark.parametrize("template", _templates(), ids=lambda t: t.name)
@pytest.mark.parametrize("angle_unit", ["deg", "gon"])
def test_the_simulator_writes_through_every_template_and_the_tablet_reads_it_back(template: Any, angle_unit: str) -> None:
    """Simulated instrument -> the template's bytes on the wire -> line reader -> decoded -> reduced: the target
    comes back (to the template's resolution: 1 mm at most here)."""
    from mobile.instruments import ShotSimulator, record_ends
    from schema.survey.polar import Station, reduce_shots

    station = Station(995.0, 1990.0, 100.512, 1.552, 71.4215 if angle_unit == "deg" else 79.3572, angle_unit)
    sim = ShotSimulator(station, template=template)
    targets = [(1001.204, 2001.377, 99.812), (990.5, 1985.25, 100.9), (995.3, 1990.1, 100.0)]
    wire = b"".join(chunk for i, t in enumerate(targets)
                    for chunk in stream_lines([sim.shot_line(*t, target_height_m=1.3, point=str(1012 + i))], template))
    reader = LineReader(Chunks(wire, 7), ends=record_ends(template))
    lines: list[str] = []
    for _ in range(100):
        lines += reader.poll()
    assert len(lines) == 3
    for (e, n, z), line in zip(targets, lines):
        reading, unit = parse_shot_line(line, template=template)
        assert reading.raw_line == line.strip() if template.style != "fixed" else reading.raw_line == line
        r = reduce_shots(Station(station.e, station.n, station.z, station.instrument_height,
                                 station.orientation if unit == angle_unit else
                                 station.orientation * (0.9 if unit == "deg" else 1 / 0.9), unit),
                         reading.hz, reading.zenith, reading.slope_distance_m, reading.target_height_m,
                         reading.prism_constant_mm)
        assert (r.e[0], r.n[0], r.z[0]) == pytest.approx((e, n, z), abs=0.001), line


def test_the_tablets_template_reads_instrument_lines_and_typed_lines_stay_bks() -> None:
    from mobile.instruments import ShotFeed, typed_shot_line
    from schema.survey import templates as tp

    fixed = tp.load_template(EXAMPLE_TEMPLATES / "fixed.toml")
    body = "    1012  123.4567   91.2345   123456  1300"
    line = body + tp.checksum("xor", body)
    reading, unit = parse_shot_line(line, template=fixed)
    assert (reading.hz, reading.zenith, reading.slope_distance_m, unit) == (123.4567, 91.2345, 12.3456, "gon")
    assert reading.raw_line == line  # kept as received, leading spaces and checksum included
    typed, _ = parse_shot_line(typed_shot_line("1", "90", "5", "1.3", angle_unit="deg"), template=fixed)
    assert typed.slope_distance_m == 5.0
    with pytest.raises(InstrumentLineInvalid, match="fixed-gon: the line"):
        parse_shot_line("1012,45,90,5,1.3", template=fixed)
    assert ShotFeed().template is tp.BKS
    feed = ShotFeed(fixed)
    assert feed.status() == ("Instrument template: fixed-gon (fixed, " + str(EXAMPLE_TEMPLATES / "fixed.toml")
                             + ")\nNo line read from the instrument yet.")
    with pytest.raises(InstrumentLineInvalid, match="fixed-gon: the line 'garbage' has a wrong checksum"):
        feed.take([line, "garbage"])  # the newest line is the one that counts
    assert feed.status().splitlines()[1:] == [
        "Last line: garbage",
        f"NOT READ: fixed-gon: the line 'garbage' has a wrong checksum ('ge', expected {_xor('garba')}); the line "
        "was garbled on the way: take the shot again",
    ]
    assert feed.take(["garbage", line]) == line
    assert feed.take([]) is None
    assert feed.status().splitlines()[1:] == [
        f"Last line: {line}",
        "Read as: point 1012, hz 123.4567 gon, zenith 91.2345 gon, slope distance 12.3456 m, target height "
        "1.300 m, prism constant 0 mm",
    ]
    with pytest.raises(InstrumentLineInvalid, match="bks: "):  # no template given: BKS, never another's
        parse_shot_line(line)


def _xor(text: str) -> str:
    x = 0
    for b in text.encode():
        x ^= b
    return f"{x:02X}"


def test_line_reader_keeps_leading_spaces_and_ends_records_on_etx() -> None:
    reader = LineReader(ends=b"\x03")
    assert reader.feed(b"   12  34\r\nPT1 HA+1\x03PT2") == ["   12  34", "PT1 HA+1"]
    assert reader.feed(b"\x03") == ["PT2"]


def test_baulk_tablet_refuses_a_bad_template_before_the_app_opens(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from sync_server.cli import cli

    bad = tmp_path / "total-station.toml"
    bad.write_text('name = "ts"\nstyle = "fixed"\ntarget_height_m = 1.3\n\n[[field]]\nwhat = "hz"\nstart = 1\n'
                   'width = 10\nunit = "dms"\ndecimals = 2\n')
    result = CliRunner().invoke(cli, ["tablet", "--store", str(tmp_path / "t.sqlite"), "--template", str(bad)])
    assert result.exit_code == 1
    assert result.output == (f"Error: {bad}: field: no field holds the zenith angle or the vertical angle; add one "
                             "(what = \"zenith\")\n")
    result = CliRunner().invoke(cli, ["tablet", "--store", str(tmp_path / "t.sqlite"), "--template", "nosuch"])
    assert result.exit_code == 1 and result.output.startswith("Error: nosuch: no such file; check the path")
    assert not (tmp_path / "t.sqlite").exists()  # nothing opened


def test_the_tablet_file_remembers_its_template_and_the_controllers_read_through_it(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """``--template`` is remembered by the tablet file (the whole template: the file may go), a later start
    without it reads with the same one, and the day's controller parses backsights through it."""
    import shutil

    from mobile.controllers import DayController
    from mobile.settings import TEMPLATE_SETTING, instrument_template
    from mobile.store import TabletStore
    from schema.errors import TemplateInvalid
    from schema.survey import templates as tp

    own = tmp_path / "mine.toml"
    shutil.copy(EXAMPLE_TEMPLATES / "words.toml", own)
    words = tp.load_template(own)
    with TabletStore.open(tmp_path / "t.sqlite") as store:
        assert instrument_template(store) is tp.BKS  # nothing chosen yet
        assert DayController(store, template=words).template == words
    own.unlink()  # the file is gone; the tablet file kept the template itself
    with TabletStore.open(tmp_path / "t.sqlite") as store:
        days = DayController(store)
        assert days.template == words and days.template.source == str(own)
        line = tp.encode(words, tp.Observation(123.4567, 91.2345, 12.3456, 1.3, 0.0, "gon", "1012"))
        reading, unit = parse_shot_line(line, template=days.template)
        assert (reading.hz, reading.zenith, unit) == (123.4567, 91.2345, "gon")
        assert instrument_template(store, tp.CSV) is tp.CSV  # a built-in is kept by its name
        assert store.setting(TEMPLATE_SETTING) == '{"built_in": "csv"}'
        assert DayController(store).template is tp.CSV
        store.set_setting(TEMPLATE_SETTING, '{"source": "x.toml", "template": {"name": "x"}}')
        with pytest.raises(TemplateInvalid, match="the instrument template this tablet file remembers cannot be "
                                                   "read .*; start the tablet with --template FILE"):
            DayController(store)


@pytest.mark.parametrize("name", ["bks", "csv", "delimited", "fixed", "words"])
def test_a_template_document_reads_back_as_the_same_template(name: str) -> None:
    from schema.survey import templates as tp

    t = tp.BUILT_IN[name] if name in tp.BUILT_IN else tp.load_template(EXAMPLE_TEMPLATES / f"{name}.toml")
    assert tp.parse_template(tp.template_document(t), source=t.source) == t
