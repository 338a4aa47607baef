"""Recording on the tablet, as plain functions over the store and the survey engine (no Kivy).

Instrument setups are stored with their residuals; a plotted find is saved together with the raw shot (or GNSS
fix) it came from, so its coordinates can be recomputed; everything in one transaction.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

from schema.errors import FixNotAccepted
from schema.records import ControlPoint, Find, GnssFix, Shot, Site, StationSetup
from schema.survey import gnss
from schema.survey.grid import latlon_to_grid
from schema.survey.recompute import shot_positions
from schema.survey.setup import Backsight, ControlObservation, KnownPoint, orient_by_backsights, resect

from .store import TabletStore

__all__ = ["Reading", "gnss_fields", "plotted_fields", "record_gnss_find", "record_plotted_find", "reduce_reading", "setup_by_backsight", "setup_by_resection"]


@dataclass(frozen=True)
class Reading:
    """One total-station observation as read off the instrument."""

    hz: float
    zenith: float
    slope_distance_m: float
    target_height_m: float
    shot_at: dt.datetime
    prism_constant_mm: float = 0.0
    raw_line: str | None = None


def _known(cp: ControlPoint) -> KnownPoint:
    return KnownPoint(cp.code, cp.e, cp.n, cp.z)


def setup_by_backsight(
    store: TabletStore, *, site: Site, station: ControlPoint, backsights: list[tuple[ControlPoint, Reading]],
    instrument_height_m: float, angle_unit: str, recorder: str, at: dt.datetime,
) -> tuple[StationSetup, Any]:
    """Occupy a datum, orient on one or more backsights; store the setup with each backsight's residuals."""
    result = orient_by_backsights(
        _known(station),
        [Backsight(_known(cp), r.hz, r.zenith, r.slope_distance_m) for cp, r in backsights],
        angle_unit=angle_unit,
    )
    setup = StationSetup(
        site_id=site.id, method="occupied", occupied_point_id=station.id, station_code=station.code,
        e=station.e, n=station.n, z=station.z, instrument_height_m=instrument_height_m, angle_unit=angle_unit,  # type: ignore[arg-type]
        orientation=result.orientation, set_up_at=at, recorder=recorder,
        residuals=[{"point": b.code, "angle": b.angle_residual, "distance_m": b.distance_residual_m}
                   for b in result.backsights],
    )
    return store.add(setup), result


def setup_by_resection(
    store: TabletStore, *, site: Site, code: str, observations: list[tuple[ControlPoint, Reading]],
    instrument_height_m: float, angle_unit: str, tolerance_m: float, recorder: str, at: dt.datetime,
) -> tuple[StationSetup, Any]:
    """Free-station on control points; refused (nothing stored) when a residual exceeds the tolerance."""
    result = resect(
        [ControlObservation(_known(cp), r.hz, r.zenith, r.slope_distance_m, r.target_height_m) for cp, r in observations],
        instrument_height=instrument_height_m, angle_unit=angle_unit, tolerance_m=tolerance_m,
    )
    assert result.z is not None, "control points carry heights"
    setup = StationSetup(
        site_id=site.id, method="resection", station_code=code, e=result.e, n=result.n, z=result.z,
        instrument_height_m=instrument_height_m, angle_unit=angle_unit, orientation=result.orientation,  # type: ignore[arg-type]
        set_up_at=at, recorder=recorder,
        residuals=[*result.residuals, {"scale_ppm": result.scale_ppm, "warnings": result.warnings}],
    )
    return store.add(setup), result


def reduce_reading(setup: StationSetup, reading: Reading) -> tuple[Shot, tuple[float, float, float]]:
    """The raw shot to keep for a reading, and the E, N, Z it reduces to from ``setup``."""
    shot = Shot(
        setup_id=setup.id, hz=reading.hz, zenith=reading.zenith, slope_distance_m=reading.slope_distance_m,
        target_height_m=reading.target_height_m, prism_constant_mm=reading.prism_constant_mm,
        shot_at=reading.shot_at, raw_line=reading.raw_line,
    )
    ((e, n, z),) = shot_positions(setup, [shot]).values()
    return shot, (e, n, z)


def plotted_fields(setup: StationSetup, reading: Reading) -> tuple[Shot, dict[str, Any]]:
    """The raw shot to keep and the find fields it sets (E, N, Z from the reduction, its source and sigma)."""
    shot, (e, n, z) = reduce_reading(setup, reading)
    return shot, {"e": e, "n": n, "z": z, "position_source": "total_station", "shot_id": shot.id, "gnss_fix_id": None,
                  "position_sigma_m": 0.005}


def record_plotted_find(
    store: TabletStore, *, setup: StationSetup, reading: Reading, find: dict[str, Any],
    sample: dict[str, Any] | None = None,
) -> Find:
    """Save the raw shot and the find it positions (E, N, Z from the reduction) in one transaction."""
    shot, fields = plotted_fields(setup, reading)
    if "position_sigma_m" in find:
        fields["position_sigma_m"] = find["position_sigma_m"]
    with store.atomic():
        store.add(shot)
        return store.save_find(find={**find, **fields}, sample=sample)


def gnss_fields(*, site: Site, sentences: list[str], at: dt.datetime,
                override_reason: str | None = None) -> tuple[GnssFix, dict[str, Any]]:
    """The GNSS fix to keep (raw sentences) and the find fields it sets; only RTK fixed unless overridden."""
    log = gnss.parse_nmea(sentences)
    if log.rejected or len(log.fixes) != 1:
        why = "; ".join(f"line {r.line}: {r.reason}" for r in log.rejected) or f"{len(log.fixes)} fixes in the input"
        raise FixNotAccepted(f"the receiver's sentences do not give one clean fix ({why}); take the position again")
    (fix,) = log.fixes
    if site.grid is None:
        raise FixNotAccepted(
            f"site {site.code} has no fitted grid yet, so a GNSS position cannot be put on it; "
            "the data manager fits it from the control points (baulk survey fit-grid)"
        )
    decision = gnss.accept_for_plot(fix, override_reason=override_reason)
    if not decision.accepted:
        raise FixNotAccepted(decision.reason)
    x, y, _method = latlon_to_grid([fix.lat], [fix.lon], grid=site.grid, crs=site.crs_epsg,
                                   polynomial=site.grid_polynomial)
    if fix.orthometric_height_m is None:
        raise FixNotAccepted("the fix has no height; wait for a 3D solution")
    record = GnssFix(
        site_id=site.id, raw_sentences=fix.sentences, lat=fix.lat, lon=fix.lon,
        orthometric_height_m=fix.orthometric_height_m, geoid_separation_m=fix.geoid_separation_m,
        ellipsoidal_height_m=fix.ellipsoidal_height_m, fix_quality=fix.quality, hdop=fix.hdop,
        sigma_lat_m=fix.sigma_lat_m, sigma_lon_m=fix.sigma_lon_m, sigma_alt_m=fix.sigma_alt_m,
        fixed_at=fix.fixed_at or at, plot_override_reason=override_reason if decision.overridden else None,
    )
    sigma = max((s for s in (fix.sigma_lat_m, fix.sigma_lon_m) if s is not None), default=None)
    return record, {"e": float(x[0]), "n": float(y[0]), "z": fix.orthometric_height_m + site.vertical_offset_m,
                    "position_source": "gnss", "gnss_fix_id": record.id, "shot_id": None, "position_sigma_m": sigma}


def record_gnss_find(
    store: TabletStore, *, site: Site, sentences: list[str], find: dict[str, Any],
    override_reason: str | None = None, sample: dict[str, Any] | None = None,
) -> Find:
    """Save the GNSS fix (raw sentences kept) and the find it positions; only RTK fixed unless overridden."""
    record, fields = gnss_fields(site=site, sentences=sentences, at=find["found_at"], override_reason=override_reason)
    with store.atomic():
        store.add(record)
        return store.save_find(find={**find, **fields}, sample=sample)
