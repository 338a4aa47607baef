"""Instrument input on the tablet: a line reader for serial or Bluetooth streams, Baulk's own total-station line
format, the GNSS receiver's status from its NMEA stream, and a simulator for the demo and tests. No Kivy here.

The total-station line ("BKS", Baulk shot, version 1) is our own plain ASCII format, so any instrument or
logger that can print a line can feed the tablet (a small script on a data collector, or a person typing)::

    BKS,1,<hz>,<zenith>,<slope distance m>,<target height m>,<prism constant mm>,<deg|gon|dms|mil>*<checksum>

Fields are decimal numbers with a point; the checksum is two hex digits, the XOR of every character between
the leading ``B`` and the ``*`` inclusive of the ``B`` (the same checksum idea NMEA 0183 uses, applied to our
own line). Example: ``BKS,1,45.0000,90.0000,5.0000,1.500,0,deg*28``. Lines that fail are reported with the
reason and never guessed at.

BKS is one built-in instrument line template (``schema.survey.templates``); ``baulk tablet --template FILE``
chooses another, which the tablet file remembers (``mobile.settings.instrument_template``) and the day's
controller holds (``DayController.template``), so the tablet reads what the instrument itself sends. Lines
typed on the tablet are always BKS lines; every other line is read through the tablet's template (passed to
``parse_shot_line``: there is no module-wide template). ``ShotFeed`` keeps the last line read, raw and decoded,
for the Day screen.
"""

from __future__ import annotations

import datetime as dt
import functools
import operator
from dataclasses import dataclass, field
from typing import Iterable, Iterator, Protocol

from schema.errors import InstrumentLineInvalid
from schema.survey import gnss
from schema.survey import templates as tpl

from .recording import Reading

__all__ = [
    "FieldSimulator", "GnssMonitor", "LineReader", "ShotFeed", "ShotSimulator", "TtyPort", "format_shot_line",
    "parse_shot_line", "record_ends", "shot_checksum", "stream_lines", "typed_shot_line",
]

MAX_LINE = 512  # longer runs without a line end are noise on the wire, dropped and reported


class ByteSource(Protocol):
    """What a serial port or a Bluetooth socket offers: ``read(n)`` returning up to n bytes (b"" when idle)."""

    def read(self, n: int) -> bytes: ...


@dataclass
class LineReader:
    """Turns a byte stream into text lines: CR, LF or CRLF ends a line; partial lines wait for more bytes;
    bytes that are not ASCII, and over-long runs, are dropped with a reason in ``dropped``."""

    source: ByteSource | None = None
    dropped: list[str] = field(default_factory=list)
    ends: bytes = b""  # other bytes that end a record (ETX, or a template's own terminator character)
    _buffer: bytearray = field(default_factory=bytearray)

    def feed(self, data: bytes) -> list[str]:
        """Add bytes; return the complete lines they finish (without line ends, blank lines skipped; leading
        spaces kept, as a fixed-width line needs them)."""
        self._buffer += data
        lines = []
        while True:
            cuts = (self._buffer.find(bytes([b])) for b in b"\r\n" + self.ends)
            cut = min((i for i in cuts if i >= 0), default=-1)
            if cut < 0:
                break
            raw, self._buffer = bytes(self._buffer[:cut]), self._buffer[cut + 1:]
            line = self._decode(raw)
            if line:
                lines.append(line)
        if len(self._buffer) > MAX_LINE:
            self.dropped.append(f"{len(self._buffer)} bytes without a line end were dropped")
            self._buffer.clear()
        return lines

    def _decode(self, raw: bytes) -> str | None:
        try:
            text = raw.decode("ascii").rstrip()
        except UnicodeDecodeError:
            self.dropped.append(f"a line with non-ASCII bytes was dropped ({raw[:20]!r}...)")
            return None
        return text if text.strip() else None

    def poll(self, chunk: int = 256) -> list[str]:
        """Read what the source has now and return the finished lines."""
        if self.source is None:
            return []
        return self.feed(self.source.read(chunk))


def shot_checksum(body: str) -> str:
    return f"{functools.reduce(operator.xor, (ord(c) for c in body), 0):02X}"


def typed_shot_line(hz: str, zenith: str, slope_distance_m: str, target_height_m: str, *, angle_unit: str) -> str:
    """A BKS line from readings typed off the instrument's screen; each value is checked like a received one."""
    values = []
    for name, text in zip(_FIELDS, (hz, zenith, slope_distance_m, target_height_m)):
        try:
            values.append(float(text.strip().replace(",", ".")))
        except ValueError:
            raise InstrumentLineInvalid(f"the {name} {text!r} is not a number; type it as shown on the instrument") from None
    line = format_shot_line(Reading(*values, dt.datetime.now(dt.timezone.utc)), angle_unit=angle_unit)  # type: ignore[misc]
    parse_shot_line(line)  # the same range checks as a received line
    return line


def format_shot_line(reading: Reading, *, angle_unit: str) -> str:
    """The BKS line for a reading (what the simulator sends and what the docs show); a reading that rounds to a
    full turn is written 0."""
    full = 400.0 if angle_unit == "gon" else 360.0
    hz = float(f"{reading.hz:.4f}") % full
    body = (f"BKS,1,{hz:.4f},{reading.zenith:.4f},{reading.slope_distance_m:.4f},"
            f"{reading.target_height_m:.3f},{reading.prism_constant_mm:g},{angle_unit}")
    return f"{body}*{shot_checksum(body)}"


_FIELDS = ("hz", "zenith", "slope distance", "target height", "prism constant")


def parse_shot_line(line: str, *, at: dt.datetime | None = None,
                    template: tpl.Template = tpl.BKS) -> tuple[Reading, str]:
    """A reading and its angle unit (deg or gon) from an instrument line: a BKS line (typed on the tablet) as BKS,
    any other through ``template`` (the tablet's instrument template). ``InstrumentLineInvalid`` names the field."""
    text = line.rstrip("\r\n")
    if text.lstrip().startswith("BKS,"):
        template = tpl.BKS
    decoded = tpl.decode(template, text)
    o = decoded.observation
    when = at or dt.datetime.now(dt.timezone.utc)
    return Reading(o.hz, o.zenith, o.slope_distance_m, o.target_height_m, when, prism_constant_mm=o.prism_constant_mm,
                   raw_line=decoded.raw), o.angle_unit


@dataclass
class ShotFeed:
    """What the instrument sent last, for the Day screen: the template in use, the last line as received and
    what it was read as (or why it could not be read)."""

    template: tpl.Template = tpl.BKS
    last_raw: str | None = None
    last: tpl.Decoded | None = None
    last_error: str | None = None

    def take(self, lines: Iterable[str]) -> str | None:
        """Read the lines that came in and return the newest (None when none came). When the newest cannot be
        read through the template, ``InstrumentLineInvalid`` says why; the screen shows it beside the raw line."""
        newest = None
        for line in lines:
            newest = line
        if newest is None:
            return None
        self.last_raw = newest
        try:
            self.last, self.last_error = tpl.decode(self.template, newest), None
        except InstrumentLineInvalid as exc:
            self.last, self.last_error = None, str(exc)
            raise
        return newest

    def status(self) -> str:
        """Three lines: the template, the last line as received, and what it was read as (or the problem)."""
        head = f"Instrument template: {self.template.describe()}"
        if self.last_raw is None:
            return f"{head}\nNo line read from the instrument yet."
        read = f"Read as: {self.last.describe()}" if self.last is not None else f"NOT READ: {self.last_error}"
        return f"{head}\nLast line: {self.last_raw}\n{read}"


@dataclass
class GnssMonitor:
    """The receiver's state from its NMEA stream: the last complete epoch (sentences sharing a GGA time) is
    parsed by the survey engine (pynmea2, checksums enforced). ``latest`` is that fix, ``sentences`` its lines."""

    sentences: list[str] = field(default_factory=list)
    latest: gnss.Fix | None = None
    rejected: list[str] = field(default_factory=list)
    _epoch: list[str] = field(default_factory=list)

    def feed(self, lines: Iterable[str]) -> None:
        for line in lines:
            if not line.startswith("$"):
                continue
            if line[3:6] == "GGA" and self._epoch:
                self._close_epoch()
            self._epoch.append(line)

    def flush(self) -> None:
        """Close the epoch being gathered (a receiver sends GGA first; call this when the stream pauses)."""
        if self._epoch:
            self._close_epoch()

    def _close_epoch(self) -> None:
        log = gnss.parse_nmea(self._epoch)
        self.rejected = [f"line {r.line}: {r.reason}" for r in log.rejected]
        if len(log.fixes) == 1 and not log.rejected:
            self.latest, self.sentences = log.fixes[0], list(self._epoch)
        self._epoch = []

    def status(self) -> str:
        """One line for the screen: fix quality, HDOP and sigmas, or why there is none."""
        fix = self.latest
        if fix is None:
            return "no fix yet" + (f" ({self.rejected[0]})" if self.rejected else "")
        sig = "/".join(f"{s * 100:.1f}" if s is not None else "?" for s in (fix.sigma_lat_m, fix.sigma_lon_m, fix.sigma_alt_m))
        hdop = f"{fix.hdop:.1f}" if fix.hdop is not None else "?"
        return f"{fix.quality_name}, HDOP {hdop}, sigma N/E/h {sig} cm"


class ShotSimulator:
    """Instrument lines for the demo and tests: the exact readings an instrument at ``where`` (a ``Station``, or
    a stored ``StationSetup``) would give on a target at E, N, Z, optionally with noise (``rng``)."""

    def __init__(self, where: object, *, rng: object | None = None, template: tpl.Template | None = None):
        from schema.survey.polar import Station
        from schema.survey.recompute import station_of

        self.station = where if isinstance(where, Station) else station_of(where)  # type: ignore[arg-type]
        self.rng = rng
        self.template = template or tpl.BKS

    def shot_line(self, e: float, n: float, z: float, *, target_height_m: float = 1.3, point: str | None = None) -> str:
        """The line the instrument sends for a target on E, N, Z, written through the simulator's template (a
        template that fixes the target height instead of sending it sets the pole to that height)."""
        from schema.survey.simulate import readings_for

        t = self.template
        if t.field("target_height") is None and t.target_height_m is not None:
            target_height_m = t.target_height_m
        noise = {"rng": self.rng, "sigma_angle": 0.0003, "sigma_distance_m": 0.002} if self.rng is not None else {}
        hz, zen, sd = readings_for(self.station, e, n, z, target_height_m, **noise)  # type: ignore[arg-type]
        if t is tpl.BKS:
            reading = Reading(float(hz[0]), float(zen[0]), float(sd[0]), target_height_m, dt.datetime.now(dt.timezone.utc))
            return format_shot_line(reading, angle_unit=self.station.angle_unit)
        # a prism constant the template fixes is added back on reading: send the distance without it
        sent = float(sd[0]) - (t.prism_constant_mm / 1000 if t.field("prism_constant") is None else 0.0)
        return tpl.encode(t, tpl.Observation(float(hz[0]), float(zen[0]), sent, target_height_m, 0.0,
                                             self.station.angle_unit, point))


def record_ends(template: tpl.Template) -> bytes:
    """The bytes, besides CR and LF, that end a record of ``template`` on the wire (for ``LineReader``)."""
    end = tpl.TERMINATORS.get(template.terminator, template.terminator)
    return end.encode("ascii") if end not in ("\r\n", "\r", "\n") else b""


def stream_lines(lines: Iterable[str], template: tpl.Template | None = None) -> Iterator[bytes]:
    """Lines as a device would send them (CRLF-terminated bytes, or the template's terminator); the
    simulator's wire form."""
    for line in lines:
        yield tpl.wire(template, line) if template is not None else (line + "\r\n").encode("ascii")


class TtyPort:
    """A serial or Bluetooth (SPP) link that the system shows as a device file (``/dev/ttyUSB0``,
    ``/dev/rfcomm0``), read without blocking; set its speed beforehand (``stty -F /dev/ttyUSB0 9600``)."""

    def __init__(self, path: str, *, ends: bytes = b""):
        import os

        self._fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK)
        self.reader = LineReader(self, ends=ends)

    def read(self, n: int) -> bytes:
        import os

        try:
            return os.read(self._fd, n)
        except BlockingIOError:
            return b""

    def lines(self) -> list[str]:
        out: list[str] = []
        while True:
            got = self.reader.poll()
            if not got:
                return out
            out += got

    def close(self) -> None:
        import os

        os.close(self._fd)


class FieldSimulator:
    """Stands in for the total station and the GNSS receiver in the demo, the tests and ``baulk tablet
    --simulate``: backsight lines from a station whose orientation only the simulator knows, shots on random
    points inside the trench at the depth of the unit being dug, and RTK-fixed GNSS epochs."""

    def __init__(self, *, seed: int = 7, orientation: float = 37.5, instrument_height_m: float = 1.552,
                 template: tpl.Template | None = None):
        import random

        self.rng = random.Random(seed)
        self.orientation, self.instrument_height_m = orientation, instrument_height_m
        self.template = template

    def backsight_line(self, station: object, target: object) -> str:
        from schema.survey.polar import Station

        s = Station(station.e, station.n, station.z, self.instrument_height_m, self.orientation)  # type: ignore[attr-defined]
        return ShotSimulator(s, template=self.template).shot_line(target.e, target.n, target.z,  # type: ignore[attr-defined]
                                                                  target_height_m=1.5, point=target.code)  # type: ignore[attr-defined]

    def target(self, outline: list[tuple[float, float]], top_z: float, bottom_z: float) -> tuple[float, float, float]:
        """A random point well inside the trench's bounding box, between the unit's surfaces."""
        xs, ys = [p[0] for p in outline], [p[1] for p in outline]
        e = self.rng.uniform(min(xs) + 0.2, max(xs) - 0.2)
        n = self.rng.uniform(min(ys) + 0.2, max(ys) - 0.2)
        z = bottom_z + (top_z - bottom_z) * self.rng.uniform(0.3, 0.7)
        return round(e, 3), round(n, 3), round(z, 3)

    def shot_line(self, setup: object, point: tuple[float, float, float]) -> str:
        return ShotSimulator(setup, template=self.template).shot_line(*point)

    def gnss_lines(self, site: object, point: tuple[float, float, float]) -> list[str]:
        from schema.errors import FixNotAccepted
        from schema.survey.simulate import gnss_epoch

        if getattr(site, "grid", None) is None:
            raise FixNotAccepted(f"site {getattr(site, 'code', '?')} has no fitted grid yet, so the simulated receiver "
                                 "cannot place itself; the data manager fits it (baulk survey fit-grid) and you sync")
        return gnss_epoch(site, *point, dt.datetime.now(dt.timezone.utc), quality=4)
