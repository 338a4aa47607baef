"""GNSS positions from NMEA 0183 sentences (GGA, RMC, GST), parsed by pynmea2 with checksums enforced.

A log is read line by line; a line that fails its checksum or does not parse is rejected with its line
number and the reason, never guessed at. Sentences with the same UTC time make one fix: GGA gives the position,
fix quality, HDOP and heights; RMC the date; GST the standard deviations. Only RTK fixed solutions (GGA quality
4) count as piece-plot positions unless the recorder overrides, and the override is recorded.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from typing import Iterable

import pynmea2

__all__ = ["FIX_QUALITY", "Fix", "NmeaLog", "PlotDecision", "accept_for_plot", "parse_nmea"]

# GGA fix quality indicator, NMEA 0183 (version 4.x), from memory.
FIX_QUALITY = {
    0: "invalid", 1: "autonomous GNSS", 2: "differential", 3: "PPS", 4: "RTK fixed", 5: "RTK float",
    6: "dead reckoning", 7: "manual input", 8: "simulator",
}
RTK_FIXED = 4


@dataclass
class Fix:
    time: dt.time
    lat: float
    lon: float
    quality: int
    satellites: int | None
    hdop: float | None
    orthometric_height_m: float | None
    geoid_separation_m: float | None
    date: dt.date | None = None
    sigma_lat_m: float | None = None
    sigma_lon_m: float | None = None
    sigma_alt_m: float | None = None
    sentences: list[str] = field(default_factory=list)
    lines: list[int] = field(default_factory=list)

    @property
    def ellipsoidal_height_m(self) -> float | None:
        """Height above the ellipsoid: orthometric height plus geoid separation (both from GGA)."""
        if self.orthometric_height_m is None or self.geoid_separation_m is None:
            return None
        return self.orthometric_height_m + self.geoid_separation_m

    @property
    def quality_name(self) -> str:
        return FIX_QUALITY.get(self.quality, f"unknown ({self.quality})")

    @property
    def fixed_at(self) -> dt.datetime | None:
        if self.date is None:
            return None
        return dt.datetime.combine(self.date, self.time.replace(tzinfo=None), dt.timezone.utc)


@dataclass
class Rejected:
    line: int
    text: str
    reason: str


@dataclass
class NmeaLog:
    fixes: list[Fix]
    rejected: list[Rejected]
    ignored: int  # valid sentences of other types


def _num(value: object, name: str) -> float | None:
    """A sentence's number field (empty: None); ``ValueError`` naming the field for text or NaN/infinity."""
    if value in (None, ""):
        return None
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(f"{name} {str(value)!r} is not a number") from None
    if not math.isfinite(number):
        raise ValueError(f"{name} {str(value)!r} is not a finite number")
    return number


def _int(value: object, name: str) -> int | None:
    if value in (None, ""):
        return None
    try:
        return int(value)  # type: ignore[call-overload, no-any-return]
    except (TypeError, ValueError):
        raise ValueError(f"{name} {value!r} is not a whole number") from None


def _gga(msg: pynmea2.GGA, raw: str, line: int) -> Fix | None:
    if not msg.lat or not msg.lon:
        return None
    lat, lon = _num(msg.latitude, "latitude"), _num(msg.longitude, "longitude")
    if lat is None or lon is None or abs(lat) > 90 or abs(lon) > 180:
        raise ValueError(f"position {msg.lat},{msg.lat_dir} {msg.lon},{msg.lon_dir} is not a latitude and longitude")
    return Fix(
        time=msg.timestamp, lat=lat, lon=lon,
        quality=_int(msg.gps_qual, "fix quality") or 0, satellites=_int(msg.num_sats, "satellites"),
        hdop=_num(msg.horizontal_dil, "HDOP"), orthometric_height_m=_num(msg.altitude, "altitude"),
        geoid_separation_m=_num(msg.geo_sep, "geoid separation"), sentences=[raw], lines=[line],
    )


def _extra(msg: pynmea2.RMC | pynmea2.GST) -> dict[str, object]:
    """What an RMC (the date) or GST (the sigmas) sentence adds to the fix of its time; ``ValueError`` when a field
    cannot be read."""
    if isinstance(msg, pynmea2.RMC):
        if msg.datestamp and not isinstance(msg.datestamp, dt.date):
            raise ValueError(f"date {msg.datestamp!r} is not a date (DDMMYY)")
        return {"date": msg.datestamp or None}
    return {"sigma_lat_m": _num(msg.std_dev_latitude, "latitude sigma"),
            "sigma_lon_m": _num(msg.std_dev_longitude, "longitude sigma"),
            "sigma_alt_m": _num(msg.std_dev_altitude, "altitude sigma")}


def parse_nmea(lines: Iterable[str]) -> NmeaLog:
    """Parse an NMEA log into fixes, rejecting bad lines with their number and reason."""
    fixes: list[Fix] = []
    by_time: dict[dt.time, Fix] = {}
    pending: dict[dt.time, list[tuple[dict[str, object], str, int]]] = {}
    rejected: list[Rejected] = []
    ignored = 0
    for number, raw in enumerate(lines, start=1):
        text = raw.strip()
        if not text:
            continue
        if "*" not in text:
            rejected.append(Rejected(number, text, "no checksum; a sentence without one cannot be trusted, re-read it"))
            continue
        try:
            msg = pynmea2.parse(text, check=True)
        except pynmea2.ChecksumError as exc:
            detail = str(exc.args[0][0] if isinstance(exc.args[0], tuple) else exc.args[0])
            rejected.append(Rejected(number, text, f"bad checksum: {detail.removeprefix('checksum does not match: ')} "
                                     "(given != computed); the line was garbled in transfer, re-read it"))
            continue
        except pynmea2.ParseError as exc:
            detail = exc.args[0][0] if isinstance(exc.args[0], tuple) else exc.args[0]
            rejected.append(Rejected(number, text, f"not a valid NMEA 0183 sentence ({detail})"))
            continue
        try:
            fix = _gga(msg, text, number) if isinstance(msg, pynmea2.GGA) else None
            extra = _extra(msg) if isinstance(msg, (pynmea2.RMC, pynmea2.GST)) else None
        except ValueError as exc:
            rejected.append(Rejected(number, text, f"{exc}; the sentence cannot be used, re-read it"))
            continue
        if isinstance(msg, pynmea2.GGA):
            if fix is None:
                rejected.append(Rejected(number, text, "GGA sentence without a position (no fix)"))
                continue
            fixes.append(fix)
            by_time[fix.time] = fix
            for other, otext, oline in pending.pop(fix.time, []):
                _merge(fix, other, otext, oline)
        elif extra is not None:
            t = msg.timestamp
            if t in by_time:
                _merge(by_time[t], extra, text, number)
            else:
                pending.setdefault(t, []).append((extra, text, number))
        else:
            ignored += 1
    return NmeaLog(fixes, rejected, ignored)


def _merge(fix: Fix, extra: dict[str, object], text: str, line: int) -> None:
    fix.sentences.append(text)
    fix.lines.append(line)
    for name, value in extra.items():
        if name != "date" or value is not None:
            setattr(fix, name, value)


@dataclass(frozen=True)
class PlotDecision:
    accepted: bool
    overridden: bool
    reason: str


def accept_for_plot(fix: Fix, *, override_reason: str | None = None) -> PlotDecision:
    """Whether a fix may give a piece-plotted find its position (RTK fixed only, unless overridden)."""
    if fix.quality == RTK_FIXED:
        return PlotDecision(True, False, "RTK fixed")
    if override_reason and override_reason.strip():
        return PlotDecision(True, True, f"{fix.quality_name} accepted by the recorder: {override_reason.strip()}")
    return PlotDecision(
        False, False,
        f"fix quality {fix.quality} ({fix.quality_name}) is not RTK fixed; wait for a fixed solution, "
        "or override with a reason",
    )
