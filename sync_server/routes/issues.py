"""Validation issues: list (manager, analyst) and accept with a reason (manager)."""

from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Query, Request
from pydantic import BaseModel, ConfigDict, Field

from schema.records import Device

from ..auth import require
from ..validation import accept_issue, list_issues
from ..withholding import withheld_for

router = APIRouter(prefix="/v1/issues", tags=["issues"])

Reader = Annotated[Device, Depends(require("manager", "analyst"))]
Manager = Annotated[Device, Depends(require("manager"))]


class IssuePublic(BaseModel):
    """One validation issue as stored after the latest run."""

    key: str
    code: str
    severity: Literal["error", "warning", "info"]
    record: str
    record_id: str | None
    label: str
    message: str
    fix: str
    value: str | None
    trench: str | None
    unit: str | None
    open: bool
    first_seen_at: str
    last_seen_at: str
    accepted_at: str | None
    accepted_by: str | None
    accepted_reason: str | None


class IssuesPublic(BaseModel):
    data: list[IssuePublic]
    count: int


class Acceptance(BaseModel):
    """Why the issue is accepted as it stands."""

    model_config = ConfigDict(strict=True, extra="forbid")
    reason: str = Field(min_length=3, max_length=500, examples=["bioturbation: krotovina seen in the section"])


@router.get("", response_model=IssuesPublic)
def get_issues(
    request: Request, device: Reader,
    code: str | None = None, severity: Literal["error", "warning", "info"] | None = None,
    trench: str | None = None, unit: str | None = None, include_closed: bool = False,
    limit: Annotated[int, Query(ge=1, le=1000)] = 200, offset: Annotated[int, Query(ge=0, le=2**53 - 1)] = 0,
) -> IssuesPublic:
    """Open validation issues, errors first; filter by code, severity, trench or unit."""
    store = request.app.state.store
    rows = list_issues(store, code=code, severity=severity, trench=trench, unit=unit,
                       include_closed=include_closed, limit=limit, offset=offset)
    with store.read() as conn:  # an analyst: a position check on possible human remains without its numbers
        hidden = withheld_for(conn, device.role)
    return IssuesPublic(data=[_public(hidden.issue(r)) for r in rows], count=len(rows))


@router.post("/{key}/accept", response_model=IssuePublic)
def post_accept(request: Request, key: str, body: Acceptance, device: Manager) -> IssuePublic:
    """Accept an issue with a reason; it stays listed, marked accepted."""
    row = accept_issue(request.app.state.store, key=key, by=device.label, reason=body.reason)
    return _public(row)


def _public(row: dict[str, object]) -> IssuePublic:
    return IssuePublic.model_validate({k: v for k, v in row.items() if k in IssuePublic.model_fields})
