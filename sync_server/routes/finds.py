"""Finds for managers' and analysts' scripts: paged, filtered by trench, unit, season and change-log position."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from pydantic import BaseModel, Field

from schema.records import Device, Find

from ..auth import require
from ..reading import MAX_LIMIT, list_finds

router = APIRouter(prefix="/v1", tags=["records"])

Reader = Annotated[Device, Depends(require("manager", "analyst"))]
Code = Annotated[str | None, Query(max_length=60)]
Position = Annotated[int | None, Query(ge=0, le=2**53 - 1, description=(
    "a change-log position: only records changed after it (give the `position` of an earlier answer)"))]
Limit = Annotated[int, Query(ge=1, le=MAX_LIMIT)]
Offset = Annotated[int, Query(ge=0, le=2**53 - 1)]


class Paged(BaseModel):
    count: int = Field(description="every record the filters match; `data` holds one page of them")
    offset: int
    limit: int
    position: int = Field(description="the change-log position read at: ask again with changed_after=position "
                                      "for what changed since")


class FindsPublic(Paged):
    data: list[Find] = Field(description="finds by number; ids are dashed UUIDs")


@router.get("/finds", response_model=FindsPublic)
def get_finds(request: Request, device: Reader, trench: Code = None, unit: Code = None, season: Code = None,
              changed_after: Position = None, limit: Limit = 200, offset: Offset = 0) -> dict[str, Any]:
    """Finds by number, filtered by trench code, unit code, season label and change-log position; an analyst
    gets possible human remains without their position."""
    return list_finds(request.app.state.store, trench=trench, unit=unit, season=season, changed_after=changed_after,
                      limit=limit, offset=offset, role=device.role)
