"""Units for managers' and analysts' scripts: paged, filtered by trench, unit, season and change-log position."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from pydantic import Field

from schema.records import Unit

from ..reading import list_units
from .finds import Code, Limit, Offset, Paged, Position, Reader

router = APIRouter(prefix="/v1", tags=["records"])


class UnitsPublic(Paged):
    data: list[Unit] = Field(description="units by code; ids are dashed UUIDs")


@router.get("/units", response_model=UnitsPublic)
def get_units(request: Request, device: Reader, trench: Code = None, unit: Code = None, season: Code = None,
              changed_after: Position = None, limit: Limit = 200, offset: Offset = 0) -> dict[str, Any]:
    """Units by code, filtered by trench code, unit code, season label (the units holding its finds) and
    change-log position."""
    return list_units(request.app.state.store, trench=trench, unit=unit, season=season, changed_after=changed_after,
                      limit=limit, offset=offset, role=device.role)
