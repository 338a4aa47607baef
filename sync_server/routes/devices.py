"""Devices: enrolment by one-time code (public, rate-limited), the list, new codes and revocation (manager),
and the audit trail of who changed what (manager)."""

from __future__ import annotations

import datetime as dt
import re
import uuid
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, HTTPException, Query, Request
from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from schema.records import Device, DevicePublic
from schema.records.device import LABEL_PATTERN

from ..auth import require
from ..devices import enrol_line, exchange_code, list_devices, make_code, public, revoke_device

router = APIRouter(prefix="/v1", tags=["devices"])


def _iso_only(value: Any) -> Any:
    if not isinstance(value, str) or not re.fullmatch(r"\d{4}-\d{2}-\d{2}([T ].*)?", value.strip()):
        raise ValueError("give a date and time such as 2026-07-03T09:30:00+03:00")
    return value


IsoTime = Annotated[dt.datetime, BeforeValidator(_iso_only)]

Manager = Annotated[Device, Depends(require("manager"))]


class EnrolRequest(BaseModel):
    """The one-time code the data manager gave this device."""

    model_config = ConfigDict(strict=True, extra="forbid")
    code: str = Field(min_length=12, max_length=20, examples=["7K2M-Q9XA-4TRD"])


class Block(BaseModel):
    first: int
    last: int


class Enrolled(BaseModel):
    """Shown once: keep the token on the device; the server keeps only its SHA-256."""

    device_id: str
    label: str
    role: Literal["recorder", "manager", "analyst"]
    token: str
    number_blocks: list[Block]


class NewDevice(BaseModel):
    model_config = ConfigDict(strict=True, extra="forbid")
    label: str = Field(min_length=1, max_length=60, examples=["TAB-4"], json_schema_extra={"pattern": LABEL_PATTERN},
                       description="readable text: no control or invisible characters, not only spaces "
                                   "(refused otherwise by make_code, 422 RecordInvalid)")
    role: Literal["recorder", "manager", "analyst"]


class NewCode(BaseModel):
    device: DevicePublic
    code: str = Field(description="one-time enrolment code, good once until expires_at")
    expires_at: str
    enrol_line: str = Field(description="what the QR code holds (server address, code, certificate fingerprint)")


class DevicesPublic(BaseModel):
    data: list[DevicePublic]
    count: int


class Change(BaseModel):
    position: int
    version: str
    record: str
    record_id: str
    field: str
    value: Any
    device: str
    at: str


class Changes(BaseModel):
    data: list[Change]
    count: int


@router.post("/enrol", response_model=Enrolled)
def enrol(request: Request, body: EnrolRequest) -> dict[str, Any]:
    """Exchange a one-time code for this device's id and token. At most a few attempts a minute per address."""
    who = request.client.host if request.client else "unknown"
    if not request.app.state.enrol_limit.allow(who):
        raise HTTPException(429, detail="too many enrolment attempts from this address; wait a minute and try again")
    return exchange_code(request.app.state.store, body.code)


@router.get("/devices", response_model=DevicesPublic)
def devices(request: Request, _device: Manager) -> DevicesPublic:
    """Every device with its role, when it enrolled and whether it is revoked (never a token or its hash)."""
    rows = list_devices(request.app.state.store)
    return DevicesPublic(data=rows, count=len(rows))


@router.post("/devices", response_model=NewCode)
def new_device(request: Request, body: NewDevice, manager: Manager) -> NewCode:
    """Register a device and make its one-time enrolment code."""
    device, code, expires = make_code(request.app.state.store, label=body.label, role=body.role, by=manager.label)
    line = enrol_line(str(request.base_url).rstrip("/"), code, fingerprint=request.app.state.cert_fingerprint)
    return NewCode(device=public(device), code=code, expires_at=expires.isoformat(),
                   enrol_line=line)


@router.post("/devices/{device_id}/revoke", response_model=DevicePublic)
def revoke(request: Request, device_id: uuid.UUID, _device: Manager) -> DevicePublic:
    """Revoke a device: its token is refused from the next request on."""
    done = revoke_device(request.app.state.store, str(device_id))
    return public(done)


@router.get("/audit", response_model=Changes)
def audit(request: Request, _device: Manager, record: str | None = None, record_id: uuid.UUID | None = None,
          device: str | None = None, since: IsoTime | None = None,
          limit: Annotated[int, Query(ge=1, le=2000)] = 500,
          after: Annotated[int, Query(ge=0, le=2**53 - 1, description="change-log position to continue after")] = 0) -> Changes:
    """Who changed what and when: field versions in change-log order, filtered by record, device label, time."""
    from ..audit import changes

    rows = changes(request.app.state.store, record=record, record_id=record_id, device=device, since=since,
                   limit=limit, after=after)
    return Changes(data=[Change(**r) for r in rows], count=len(rows))
