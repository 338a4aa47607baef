"""Instrument input: the line reader over a byte stream, the BKS shot line and the GNSS monitor."""

from __future__ import annotations

import datetime as dt

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
    ("XYZ,1,2", "is not a shot line (it should start with 'BKS,')"),
    ("BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*00", "has a wrong or missing checksum (expected 28)"),
    ("BKS,1,45,90,5,1.5,0,deg", "has a wrong or missing checksum"),
    ("BKS,2,45,90,5,1.5,0,deg", "Baulk reads version 1 with 8 fields"),
    ("BKS,1,45,ninety,5,1.5,0,deg", "the zenith 'ninety' in the shot line is not a number"),
    ("BKS,1,45,90,5,1.5,0,mil", "the angle unit 'mil' is neither 'deg' nor 'gon'"),
    ("BKS,1,370,90,5,1.5,0,deg", "are outside 0-360 deg"),
    ("BKS,1,45,90,0,1.5,0,deg", "slope distance 0 m is not between 0 and 2000 m"),
    ("BKS,1,45,90,5,12,0,deg", "target height 12 m is not between 0 and 10 m"),
])
def test_bad_shot_lines_name_the_problem(line: str, message: str) -> None:
    if "*" not in line and "checksum" not in message:
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
    with pytest.raises(InstrumentLineInvalid, match="zenith 0 are outside 0-360 deg"):
        typed_shot_line("1", "0", "12", "1.3", angle_unit="deg")
