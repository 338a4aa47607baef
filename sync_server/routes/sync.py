"""Sync: push a batch of the device's own versions, pull the change log after a cursor."""

from __future__ import annotations

import uuid
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from pydantic import BaseModel, ConfigDict, Field

from schema.records import Device
from schema.sync import Version
from schema.sync.versions import Whole

from ..auth import require
from ..sync import MAX_BATCH, MAX_PAGE, apply_push, list_conflicts, list_pending, pull_page, resolve_conflict

router = APIRouter(prefix="/v1", tags=["sync"])

Pusher = Annotated[Device, Depends(require("recorder", "manager"))]
Puller = Annotated[Device, Depends(require("recorder", "manager", "analyst"))]
Manager = Annotated[Device, Depends(require("manager"))]


class PushBody(BaseModel):
    """One batch of the device's own versions, keyed by (device, batch), with its content hash."""

    model_config = ConfigDict(extra="forbid")
    batch: Whole = Field(ge=1, le=2**53 - 1)
    hash: str = Field(pattern=r"^[0-9a-f]{64}$", description="SHA-256 of the versions' canonical JSON lines")
    versions: list[Version] = Field(max_length=MAX_BATCH)


class Refused(BaseModel):
    """A version the server would not take from this device, and why (the batch is acknowledged all the same)."""

    version: str
    record: str
    field: str
    reason: str = Field(description="a sentence naming the record and field, and who may set it")


class PushAck(BaseModel):
    batch: int
    received: int = Field(description="versions in the batch: applied + duplicates + ignored + refused")
    applied: int
    duplicates: int = Field(description="versions the server held already")
    ignored: int = Field(description="versions of server-owned records (devices, number blocks), never taken from a device")
    refused: list[Refused] = Field(
        default=[], description="versions of set-up records or fields only a manager device or the server may "
                                "write, and find numbers past 2^53 - 1")
    rows_written: int
    pending_rows: int
    conflicts_open: int
    number_blocks: list[dict[str, int]]
    replayed: bool = Field(description="this batch was applied before: `applied` is 0 (this request changed "
                                       "nothing) and `original` tells what the first request applied")
    original: dict[str, int] | None = Field(default=None, description="for a replayed batch, the first answer's "
                                            "applied, duplicates, ignored and rows_written")
    server_time_ms: int


class PullPage(BaseModel):
    versions: list[Version]
    next: int
    more: bool
    own_left_out: int = Field(default=0, description="versions the caller made itself between the cursor and "
                                                     "`next`, left out of the page (it holds them)")
    server_time_ms: int


class ConflictValue(BaseModel):
    version: str
    record_id: str = Field(description="the record that holds this value (for a number clash, each find)")
    field: str
    value: Any
    device: str
    at: str


class ConflictPublic(BaseModel):
    record: str
    record_id: str
    field: str
    kind: Literal["concurrent", "void", "duplicate_number"] = Field(
        description="concurrent: two values of one field; void: edits the void did not see; "
                    "duplicate_number: finds sharing a site and number")
    values: list[ConflictValue]


class ConflictsPublic(BaseModel):
    data: list[ConflictPublic]
    count: int


class Resolution(BaseModel):
    """The value chosen (or typed) for a conflicting field."""

    model_config = ConfigDict(extra="forbid")
    record: str = Field(max_length=40, examples=["find"])
    record_id: uuid.UUID
    field: str = Field(max_length=60, examples=["unit_id"])
    value: Any
    confirm_far: bool = Field(default=False, description="a new find number more than 10 blocks above the highest "
                                                         "issued is meant (otherwise it is refused, 409)")


def _push_schema() -> dict[str, Any]:
    schema = PushBody.model_json_schema(ref_template="#/components/schemas/{model}")
    schema.pop("$defs", None)
    return schema


@router.post("/sync/push", response_model=PushAck, openapi_extra={
    "requestBody": {"required": True, "content": {"application/json": {"schema": _push_schema()}}}})
async def push(request: Request, device: Pusher) -> dict[str, Any]:
    """Apply a batch of this device's versions once; the same batch again returns its first acknowledgement."""
    from fastapi import HTTPException
    from fastapi.concurrency import run_in_threadpool
    from pydantic import ValidationError

    raw = await request.body()
    try:
        body = PushBody.model_validate_json(raw)  # JSON mode: strict types, UUIDs as strings
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(p) for p in first["loc"])
        raise HTTPException(422, detail=f"push body refused at {where}: {first['msg']}") from None
    # validation runs again after the answer when something was applied (validation.RevalidateAfterAnswer)
    return await run_in_threadpool(apply_push, request.app.state.store, device=device, batch=body.batch,
                                   content_hash=body.hash, versions=body.versions)


@router.get("/sync/pull", response_model=PullPage)
def pull(request: Request, device: Puller, after: Annotated[int, Query(ge=0, le=2**53 - 1)] = 0,
         limit: Annotated[int, Query(ge=1, le=MAX_PAGE)] = 500) -> dict[str, Any]:
    """Versions after the cursor, in change-log order."""
    return pull_page(request.app.state.store, after=after, limit=limit, device=device)


@router.get("/conflicts", response_model=ConflictsPublic)
def conflicts(request: Request, _device: Manager) -> ConflictsPublic:
    """Open conflicts: every competing value, with the device and time that made it."""
    rows = list_conflicts(request.app.state.store)
    return ConflictsPublic(data=[ConflictPublic.model_validate(r) for r in rows], count=len(rows))


@router.post("/conflicts/resolve")
def resolve(request: Request, body: Resolution, _device: Manager) -> dict[str, Any]:
    """Resolve a conflict with a value: a new version whose parents are all the competing ones."""
    from schema.errors import NumberTooFar

    try:
        return resolve_conflict(request.app.state.store, record=body.record, record_id=body.record_id,
                                field=body.field, value=body.value, confirm_far=body.confirm_far)
    except NumberTooFar as exc:
        raise exc.confirm_with('"confirm_far": true in the request') from None


class PendingPublic(BaseModel):
    record: str
    record_id: str
    reason: str = Field(description="a sentence: what is wrong or missing, who sent it, and the fix")
    waits_for: str | None = Field(description="'<record>:<id>' a missing parent or the row it clashes with, "
                                              "'schema:<n>' a Baulk that reads schema n, 'edit' a new value of it")


class PendingList(BaseModel):
    data: list[PendingPublic]
    count: int = Field(description="every pending row held (data shows at most `limit` of them)")


@router.get("/pending", response_model=PendingList)
def pending(request: Request, _device: Manager,
            limit: Annotated[int, Query(ge=1, le=MAX_PAGE)] = 500) -> dict[str, Any]:
    """Records held but not shown yet, each with its reason (an invalid value, who sent it and the fix) and what
    it waits for."""
    return list_pending(request.app.state.store, limit=limit)
