"""NMEA 0183 parsing and the RTK-fixed rule."""

from __future__ import annotations

import functools
import operator

import pytest

from schema.survey.gnss import accept_for_plot, parse_nmea

# The GGA example sentence published in countless NMEA references (e.g. the NMEA 0183 sentence descriptions
# circulated with gpsd): 12:35:19 UTC, 48 07.038' N, 11 31.000' E, GPS fix, 8 satellites, HDOP 0.9,
# 545.4 m above mean sea level, geoid separation 46.9 m; checksum 47.
GGA = "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47"
# The RMC example published beside it: same time, 23 March 1994; checksum 6A.
RMC = "$GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6A"


def nmea(body: str) -> str:
    """A sentence with its checksum: XOR of the characters between '$' and '*' (NMEA 0183), in hex."""
    return f"${body}*{functools.reduce(operator.xor, map(ord, body), 0):02X}"


def test_checksum_helper_matches_the_published_example() -> None:
    assert nmea(GGA[1:-3]) == GGA


def test_published_gga_example() -> None:
    log = parse_nmea([GGA, RMC])
    assert log.rejected == []
    (fix,) = log.fixes
    assert (fix.lat, fix.lon) == pytest.approx((48 + 7.038 / 60, 11 + 31.0 / 60), abs=1e-12)
    assert (fix.quality, fix.satellites, fix.hdop) == (1, 8, 0.9)
    assert fix.orthometric_height_m == 545.4 and fix.geoid_separation_m == 46.9
    assert fix.ellipsoidal_height_m == pytest.approx(592.3)
    assert fix.fixed_at is not None and fix.fixed_at.isoformat() == "1994-03-23T12:35:19+00:00"
    assert fix.lines == [1, 2]


def test_bad_checksum_is_refused_with_its_line_number() -> None:
    bad = GGA[:-2] + "48"
    log = parse_nmea(["", bad, "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,", "hello"])
    assert log.fixes == []
    assert [(r.line, r.reason) for r in log.rejected] == [
        (2, "bad checksum: 48 != 47 (given != computed); the line was garbled in transfer, re-read it"),
        (3, "no checksum; a sentence without one cannot be trusted, re-read it"),
        (4, "no checksum; a sentence without one cannot be trusted, re-read it"),
    ]


def test_rtk_fix_with_gst_sigmas() -> None:
    lines = [
        nmea("GNGGA,081500.00,0103.2400,S,03454.6000,E,4,18,0.6,1204.512,M,-12.300,M,1.0,0001"),
        nmea("GNGST,081500.00,0.010,0.008,0.006,12.0,0.007,0.006,0.015"),
        nmea("GNGGA,081501.00,0103.2401,S,03454.6001,E,5,17,0.7,1204.530,M,-12.300,M,1.0,0001"),
        nmea("GPGSV,3,1,11,03,03,111,00,04,15,270,00,06,01,010,00,13,06,292,00"),
    ]
    log = parse_nmea(lines)
    assert log.rejected == [] and log.ignored == 1
    fixed, floating = log.fixes
    assert fixed.lat == pytest.approx(-(1 + 3.24 / 60)) and fixed.lon == pytest.approx(34 + 54.6 / 60)
    assert (fixed.sigma_lat_m, fixed.sigma_lon_m, fixed.sigma_alt_m) == (0.007, 0.006, 0.015)
    assert fixed.ellipsoidal_height_m == pytest.approx(1192.212)
    assert accept_for_plot(fixed).accepted
    decision = accept_for_plot(floating)
    assert not decision.accepted
    assert decision.reason == ("fix quality 5 (RTK float) is not RTK fixed; wait for a fixed solution, "
                               "or override with a reason")
    forced = accept_for_plot(floating, override_reason="canopy; float held 2 min, sigma 2 cm")
    assert forced.accepted and forced.overridden
    assert forced.reason == "RTK float accepted by the recorder: canopy; float held 2 min, sigma 2 cm"
