"""Raw survey observations: instrument setups, total-station shots and GNSS fixes.

Raw observations are always kept, so coordinates can be recomputed when a setup is corrected.
"""

from __future__ import annotations

import uuid
from typing import Annotated, Any

from pydantic import Field, model_validator

from .. import vocab
from ..fields import Code, Easting, Elevation, Id, Initials, Metres, Northing, Ref, Timestamp, new_id
from ..validation import FieldError
from ._base import Record, spec

__all__ = [
    "GnssFix", "GnssFixBase", "Shot", "ShotBase", "StationSetup", "StationSetupBase", "SPECS",
]


class StationSetupBase(Record):
    """A total-station setup: occupied over a datum (with backsights) or free-stationed by resection."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    method: vocab.SetupMethod
    occupied_point_id: Annotated[uuid.UUID | None, Ref("control_point")] = Field(
        default=None, description="the datum occupied (method 'occupied')"
    )
    station_code: Code
    e: Easting
    n: Northing
    z: Elevation
    instrument_height_m: Metres
    angle_unit: vocab.AngleUnit = "deg"
    orientation: float = Field(
        allow_inf_nan=False, description="grid bearing of the zero horizontal reading, in angle_unit"
    )
    residuals: list[dict[str, Any]] = Field(default_factory=list, description="per-point residuals of the setup")
    set_up_at: Timestamp
    recorder: Initials

    @model_validator(mode="after")
    def _occupied_has_point(self) -> "StationSetupBase":
        if self.method == "occupied" and self.occupied_point_id is None:
            raise FieldError("occupied_point_id", "an occupied setup names no datum", "give the control point the instrument stands over")
        full = 360.0 if self.angle_unit == "deg" else 400.0
        if not 0 <= self.orientation < full:
            raise FieldError("orientation", f"orientation {self.orientation:g} is outside 0-{full:g} {self.angle_unit}", "reduce it into one turn")
        return self


class StationSetup(StationSetupBase):
    id: Id = Field(default_factory=new_id)


class ShotBase(Record):
    """One raw total-station observation, angles in the setup's unit."""

    setup_id: Annotated[uuid.UUID, Ref("station_setup")]
    hz: float = Field(ge=0, allow_inf_nan=False, description="horizontal circle reading")
    zenith: float = Field(ge=0, allow_inf_nan=False, description="zenith angle (0 = straight up)")
    slope_distance_m: Annotated[float, Field(gt=0, le=5000, allow_inf_nan=False, description="slope distance (m)")]
    target_height_m: Metres
    prism_constant_mm: float = Field(default=0.0, ge=-100, le=100, allow_inf_nan=False)
    shot_at: Timestamp
    raw_line: str | None = Field(default=None, max_length=1000, description="the instrument's line as received")


class Shot(ShotBase):
    id: Id = Field(default_factory=new_id)


class GnssFixBase(Record):
    """A GNSS position with its raw NMEA sentences and quality."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    raw_sentences: list[str] = Field(min_length=1, description="NMEA 0183 sentences as received")
    lat: float = Field(ge=-90, le=90, allow_inf_nan=False, description="latitude, decimal degrees (WGS 84)")
    lon: float = Field(ge=-180, le=180, allow_inf_nan=False, description="longitude, decimal degrees (WGS 84)")
    orthometric_height_m: float | None = Field(default=None, allow_inf_nan=False)
    geoid_separation_m: float | None = Field(default=None, allow_inf_nan=False)
    ellipsoidal_height_m: float | None = Field(default=None, allow_inf_nan=False)
    fix_quality: Annotated[int, Field(ge=0, le=8, description="GGA fix quality indicator (4 = RTK fixed)")]
    hdop: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    sigma_lat_m: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    sigma_lon_m: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    sigma_alt_m: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    fixed_at: Timestamp
    plot_override_reason: str | None = Field(
        default=None, max_length=500,
        description="why a fix that is not RTK fixed was accepted for a piece-plot (the recorder's words)",
    )


class GnssFix(GnssFixBase):
    id: Id = Field(default_factory=new_id)


SPECS = (
    spec("station_setup", StationSetupBase, StationSetup),
    spec("shot", ShotBase, Shot, indexes=(("setup_id",),)),
    spec("gnss_fix", GnssFixBase, GnssFix),
)
