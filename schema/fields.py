"""Field types shared by the record models.

Each type carries its validation (pydantic constraints), its help text (used in error fixes, JSON Schema and
tablet forms) and, through the small markers below, what the derived SQL table needs (primary key, foreign key).
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Annotated

from pydantic import AfterValidator, AwareDatetime, Field, StringConstraints

from .munsell import MunsellError, parse_munsell

__all__ = [
    "MAX_JSON_INT",
    "Code",
    "Elevation",
    "Easting",
    "Id",
    "Initials",
    "Metres",
    "Munsell",
    "Northing",
    "PrimaryKey",
    "Ref",
    "Sha256Hex",
    "Timestamp",
    "new_id",
]


# The largest whole number every JSON reader keeps exactly (2^53 - 1): the bound on find numbers, number floors
# and every other integer that travels between Baulk replicas.
MAX_JSON_INT = 2**53 - 1


@dataclass(frozen=True)
class PrimaryKey:
    """Marks the primary key column of a derived table."""


@dataclass(frozen=True)
class Ref:
    """Marks a foreign key to ``<table>.<column>`` in the derived table."""

    table: str
    column: str = "id"
    on_delete: str | None = None


def new_id() -> uuid.UUID:
    """A fresh record id (random UUID): tablets mint ids offline."""
    return uuid.uuid4()


def _canonical_munsell(text: str) -> str:
    try:
        return str(parse_munsell(text))
    except MunsellError as exc:
        raise ValueError(str(exc)) from None


Id = Annotated[uuid.UUID, PrimaryKey(), Field(description="Record id (UUID), minted where the record is made")]
Code = Annotated[
    str,
    StringConstraints(strip_whitespace=True, pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,23}$"),
    Field(description="a short code: letters, digits, '.', '_' or '-', at most 24 characters", examples=["1012"]),
]
Initials = Annotated[
    str,
    StringConstraints(pattern=r"^[A-Z]{2,4}$"),
    Field(description="recorder's initials, 2-4 capital letters", examples=["AK"]),
]
Easting = Annotated[float, Field(allow_inf_nan=False, description="grid easting in metres", examples=[512.347])]
Northing = Annotated[float, Field(allow_inf_nan=False, description="grid northing in metres", examples=[1033.912])]
Elevation = Annotated[
    float, Field(allow_inf_nan=False, description="elevation (Z) in metres on the site datum", examples=[101.254])
]
Metres = Annotated[float, Field(allow_inf_nan=False, ge=0, description="a length in metres", examples=[0.25])]
Munsell = Annotated[
    str,
    AfterValidator(_canonical_munsell),
    Field(description="Munsell colour, hue value/chroma", examples=["10YR 5/3"]),
]
Sha256Hex = Annotated[
    str, StringConstraints(pattern=r"^[0-9a-f]{64}$"), Field(description="SHA-256 as 64 lower-case hex digits")
]
Timestamp = Annotated[
    AwareDatetime, Field(description="date and time with a time zone (ISO 8601)", examples=["2026-07-14T09:31:00+03:00"])
]
