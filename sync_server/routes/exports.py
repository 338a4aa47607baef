"""Exports for analysts: the same files ``baulk export`` writes, made on request and sent as one zip."""

from __future__ import annotations

import shutil
from typing import Annotated

from fastapi import APIRouter, BackgroundTasks, Depends, Query, Request
from fastapi.responses import FileResponse

from schema.records import Device

from ..auth import require
from ..exports import export_zip_to_send

router = APIRouter(prefix="/v1/exports", tags=["exports"])

Reader = Annotated[Device, Depends(require("manager", "analyst"))]


@router.get("/latest.zip", response_class=FileResponse,
            responses={200: {"content": {"application/zip": {}}, "description": "the export files in one zip"}})
def download(request: Request, _device: Reader, background: BackgroundTasks,
             seasons: Annotated[list[str] | None, Query(max_length=20)] = None, strict: bool = False) -> FileResponse:
    """Run an export now (finds, excluded, counts, volumes, Darwin Core, GeoPackage, pictures, data package,
    manifest) and download it as ``baulk-export.zip``."""
    archive, work = export_zip_to_send(request.app.state.store, seasons=seasons or None, strict=strict,
                                       photos_dir=request.app.state.photos.root)  # the running server's photos
    background.add_task(shutil.rmtree, work, True)  # removed once sent
    return FileResponse(archive, media_type="application/zip", filename="baulk-export.zip")
