"""The photos in an export: ``photo_register.csv`` (one row per photo, keys to finds, units and trenches; joined
into ``exports.RESOURCES`` and so described in ``datapackage.json``) and ``photos/`` with the files the camp holds,
named by what they show and their photo number (``find-1203_TAB-1-P7.jpg``, ``unit-101_TAB-1-P8.jpg``).

Photos of possible human remains keep their register row but their file stays out of the export, as their
positions do (``schema.withholding``); photos of finds the export leaves out (voided, strict mode) are left out.
"""

from __future__ import annotations

import shutil
import uuid
from pathlib import Path
from typing import Any

from schema.records import Find, Photo, Trench, Unit

from .photos import PhotoVault, photo_dir

__all__ = ["PHOTO_RESOURCES", "find_media", "write_photo_files"]

_ID = {"required": True}
PHOTO_RESOURCES: dict[str, tuple[str, list[tuple[str, str, str, dict[str, Any]]], list[str], list[dict[str, Any]]]] = {
    "photo_register": ("The photo register: one row per photo, with the file's name under photos/", [
        ("id", "string", "photo id (UUID)", _ID),
        ("photo", "string", "photo name: the taking tablet's label and its photo number", _ID),
        ("number", "integer", "photo number in the taking tablet's own sequence", {"required": True, "minimum": 1}),
        ("device", "string", "the tablet that took it", {}),
        ("subject", "string", "what it shows", {"required": True, "enum": ["find", "unit", "trench", "level", "day"]}),
        ("find", "string", "find id (UUID) when it shows a find", {}),
        ("find_number", "integer", "find number when it shows a find", {"minimum": 1}),
        ("unit", "string", "unit code when it shows a unit or a level", {}),
        ("trench", "string", "trench code", {}),
        ("caption", "string", "what the photo shows, in words", {}),
        ("facing", "string", "direction the camera faces (N ... NW, down for a plan shot)",
         {"enum": ["N", "NE", "E", "SE", "S", "SW", "W", "NW", "down"]}),
        ("scale_in_frame", "boolean", "a scale bar is in the frame", _ID),
        ("north_arrow_in_frame", "boolean", "a north arrow is in the frame", _ID),
        ("taken_at", "datetime", "when it was taken (UTC)", _ID), ("by", "string", "photographer's initials", _ID),
        ("width_px", "integer", "image width, pixels", _ID), ("height_px", "integer", "image height, pixels", _ID),
        ("bytes", "integer", "file size, bytes", _ID),
        ("sha256", "string", "SHA-256 of the file", _ID),
        ("file", "string", "the file under photos/; empty when the camp does not hold it or it is withheld", {}),
        ("withheld", "boolean", "a photo of possible human remains: the file is not published", _ID),
    ], ["id"], [{"fields": ["find"], "reference": {"resource": "finds", "fields": ["id"]}},
                {"fields": ["trench"], "reference": {"resource": "trenches", "fields": ["code"]}}]),
}


def _extension(path: Path) -> str:
    with open(path, "rb") as f:
        head = f.read(8)
    return ".jpg" if head.startswith(b"\xff\xd8") else ".png" if head.startswith(b"\x89PNG") else ".img"


def write_photo_files(store: Any, tmp: Path, *, finds: list[Find], all_finds: list[Find], units: list[Unit],
                      trenches: list[Trench], photos_dir: Path | None = None) -> list[dict[str, Any]]:
    """Copy the photo files into ``tmp/photos/`` and give the register rows (written by the caller)."""
    vault = PhotoVault(photo_dir(store.url, photos_dir))
    included = {f.id: f for f in finds}
    every = {f.id: f for f in all_finds}
    unit_code = {u.id: u.code for u in units}
    trench_code = {t.id: t.code for t in trenches}
    from schema.records import Device

    labels = {d.id: d.label for d in store.list(Device)}
    rows = []
    for p in sorted(store.list(Photo), key=lambda p: (p.taken_at, str(p.device_id), p.number)):
        if p.voided or (p.subject == "find" and p.subject_id not in included):
            continue
        find = every.get(p.subject_id) if p.subject == "find" else None  # type: ignore[arg-type]
        withheld = bool(find and find.human_remains)
        name = f"{labels.get(p.device_id, 'device') if p.device_id else 'device'}-P{p.number}"  # type: ignore[arg-type]
        what = (f"find-{find.number}" if find else f"unit-{unit_code.get(p.subject_id, 'x')}"  # type: ignore[arg-type]
                if p.subject in ("unit", "level") else f"trench-{trench_code.get(p.subject_id, 'x')}"  # type: ignore[arg-type]
                if p.subject == "trench" else "day")
        file = ""
        if vault.has(p.sha256) and not withheld:
            src = vault.path(p.sha256)
            file = f"photos/{what}_{name}{_extension(src)}"
            (tmp / "photos").mkdir(exist_ok=True)
            shutil.copyfile(src, tmp / file)
        rows.append({"id": str(p.id), "photo": name, "number": p.number, "device": labels.get(p.device_id, ""),  # type: ignore[arg-type]
                     "subject": p.subject, "find": str(find.id) if find else None,
                     "find_number": find.number if find else None,
                     "unit": unit_code.get(p.subject_id) if p.subject in ("unit", "level") else None,  # type: ignore[arg-type]
                     "trench": trench_code.get(p.trench_id) if p.trench_id else None,  # type: ignore[arg-type]
                     "caption": p.caption, "facing": p.facing, "scale_in_frame": p.scale_in_frame,
                     "north_arrow_in_frame": p.north_arrow_in_frame, "taken_at": p.taken_at, "by": p.by,
                     "width_px": p.width_px, "height_px": p.height_px, "bytes": p.bytes, "sha256": p.sha256,
                     "file": file, "withheld": withheld})
    return rows



def find_media(register: list[dict[str, Any]]) -> dict[uuid.UUID, list[str]]:
    """Each find's exported photo files, in register order (Darwin Core ``associatedMedia``): only files written
    under photos/, so a withheld photo (possible human remains) or one the camp does not hold is never named."""
    media: dict[uuid.UUID, list[str]] = {}
    for r in register:
        if r["find"] and r["file"] and not r["withheld"]:
            media.setdefault(uuid.UUID(r["find"]), []).append(r["file"])
    return media
