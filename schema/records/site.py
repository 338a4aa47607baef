"""Site, season, control points and trenches: the frame every find is recorded in."""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Annotated

from pydantic import BaseModel, Field, model_validator

from ..fields import Code, Easting, Elevation, Id, Metres, Northing, Ref, new_id
from ..validation import FieldError
from ._base import STRICT, Record, spec

__all__ = [
    "ControlPoint", "ControlPointBase", "GridPolynomial", "GridTransform", "Season", "SeasonBase", "Site", "SiteBase",
    "Trench", "TrenchBase", "SPECS",
]


class GridTransform(BaseModel):
    """2D similarity (Helmert) from the site grid to the projected CRS: E = tx + a*x - b*y, N = ty + b*x + a*y."""

    model_config = STRICT
    a: float = Field(allow_inf_nan=False, description="scale * cos(rotation)")
    b: float = Field(allow_inf_nan=False, description="scale * sin(rotation)")
    tx: float = Field(allow_inf_nan=False, description="CRS easting of the grid origin (m)")
    ty: float = Field(allow_inf_nan=False, description="CRS northing of the grid origin (m)")


class GridPolynomial(BaseModel):
    """Latitude/longitude (WGS 84) -> site grid as a polynomial in scaled offsets u, v; fitted with PROJ."""

    model_config = STRICT
    degree: int = Field(ge=1, le=5)
    lat0: float = Field(ge=-90, le=90, description="centre latitude (deg)")
    lon0: float = Field(ge=-180, le=180, description="centre longitude (deg)")
    span_deg: float = Field(gt=0, description="u = (lon - lon0) / span_deg, v = (lat - lat0) / span_deg")
    cx: list[float] = Field(description="coefficients of grid E, in monomial order")
    cy: list[float] = Field(description="coefficients of grid N, in monomial order")
    half_extent_m: float = Field(gt=0, description="half the side of the square it was fitted over (m)")
    max_error_m: float = Field(ge=0, description="largest error found on the dense check grid (m)")
    check_points: int = Field(ge=1, description="how many check points measured max_error_m")


class SiteBase(Record):
    """A site: its projected CRS, its grid and its local safety settings."""

    code: Code
    name: Annotated[str, Field(min_length=1, max_length=120, description="the site's name", examples=["Vellan Lake Margin"])]
    crs_epsg: Annotated[
        int, Field(ge=1024, le=999999, description="EPSG code of the site's projected CRS", examples=[32736])
    ]
    grid: GridTransform | None = Field(default=None, description="site grid -> CRS similarity, fitted from control points")
    grid_polynomial: GridPolynomial | None = Field(
        default=None, description="lat/lon -> site grid fallback for tablets without PROJ, fitted by the server"
    )
    vertical_offset_m: float = Field(default=0.0, allow_inf_nan=False, description="site datum Z minus CRS height (m)")
    shoring_check_depth_m: Annotated[
        float,
        Field(gt=0, le=10, description="depth at which the app asks for the shoring check; set per local rules"),
    ] = 1.2
    z_tolerance_m: Annotated[
        float, Field(gt=0, le=1, description="tolerance on a find's Z against its unit's surfaces (m)")
    ] = 0.02
    timezone: str = Field(
        default="UTC", description="the site's time zone (IANA name), for dates on finds and units",
        examples=["Africa/Nairobi"],
    )
    country_code: str | None = Field(
        default=None, pattern=r"^[A-Z]{2}$",
        description="the country the site lies in, as an ISO 3166-1 alpha-2 code (for specimen records)",
        examples=["KE"],
    )
    grid_tolerance_m: Annotated[
        float, Field(gt=0, le=10, description="largest residual of a control point accepted when the site grid is fitted (m)")
    ] = 0.05
    number_block_size: Annotated[
        int, Field(ge=10, le=100000, description="find numbers the camp server issues to a tablet at a time")
    ] = 500

    @model_validator(mode="after")
    def _known_zone(self) -> "SiteBase":
        import zoneinfo

        try:
            zoneinfo.ZoneInfo(self.timezone)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            raise FieldError(
                "timezone", f"time zone {self.timezone!r} is not known",
                "give an IANA name such as 'Africa/Nairobi', or 'UTC'",
            ) from None
        return self


class Site(SiteBase):
    id: Id = Field(default_factory=new_id)


class SeasonBase(Record):
    """A field season. Units and numbering carry across seasons."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    label: Annotated[str, Field(min_length=1, max_length=40, description="season label", examples=["2026"])]
    starts_on: dt.date
    ends_on: dt.date | None = None

    @model_validator(mode="after")
    def _ends_after_start(self) -> "SeasonBase":
        if self.ends_on is not None and self.ends_on < self.starts_on:
            raise FieldError("ends_on", f"ends_on {self.ends_on} is before starts_on {self.starts_on}", "swap or correct the dates")
        return self


class Season(SeasonBase):
    id: Id = Field(default_factory=new_id)


class ControlPointBase(Record):
    """A site datum with grid coordinates and, optionally, CRS coordinates for fitting the grid."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    code: Code
    e: Easting
    n: Northing
    z: Elevation
    crs_e: float | None = Field(default=None, allow_inf_nan=False, description="CRS easting (m), for grid fitting")
    crs_n: float | None = Field(default=None, allow_inf_nan=False, description="CRS northing (m), for grid fitting")

    @model_validator(mode="after")
    def _crs_pair(self) -> "ControlPointBase":
        if (self.crs_e is None) != (self.crs_n is None):
            raise FieldError("crs_n" if self.crs_n is None else "crs_e", "only one of crs_e, crs_n is given", "give both, or neither")
        return self


class ControlPoint(ControlPointBase):
    id: Id = Field(default_factory=new_id)


def _ring_area(ring: list[tuple[float, float]]) -> float:
    """Signed shoelace area of a ring."""
    total = 0.0
    for (x1, y1), (x2, y2) in zip(ring, ring[1:] + ring[:1]):
        total += x1 * y2 - x2 * y1
    return total / 2


class TrenchBase(Record):
    """A trench: its outline (grid coordinates) and the seasons it was opened in."""

    site_id: Annotated[uuid.UUID, Ref("site")]
    code: Code
    outline: list[tuple[Easting, Northing]] = Field(
        min_length=3, description="outline polygon as [E, N] vertices in grid metres, not closed", examples=[[[0, 0], [2, 0], [2, 2], [0, 2]]]
    )
    seasons_opened: list[uuid.UUID] = Field(default_factory=list, description="ids of the seasons it was open")
    max_depth_m: Metres | None = Field(default=None, description="deepest point reached below the surface (m)")

    @model_validator(mode="after")
    def _outline_has_area(self) -> "TrenchBase":
        ring = list(self.outline)
        if len(ring) > 3 and ring[0] == ring[-1]:
            ring = ring[:-1]
        if abs(_ring_area(ring)) < 1e-6:
            raise FieldError("outline", "the outline encloses no area", "list at least three corners in order around the trench")
        return self


class Trench(TrenchBase):
    id: Id = Field(default_factory=new_id)


SPECS = (
    spec("site", SiteBase, Site, unique=(("code",),)),
    spec("season", SeasonBase, Season, unique=(("site_id", "label"),)),
    spec("control_point", ControlPointBase, ControlPoint, unique=(("site_id", "code"),)),
    spec("trench", TrenchBase, Trench, unique=(("site_id", "code"),)),
)
