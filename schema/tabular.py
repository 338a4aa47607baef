"""Reading the small CSV and JSON files data managers hand to the command line, with errors that name the
file, the line, the column and the fix."""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path
from typing import Any

from .errors import InputFileInvalid

__all__ = ["read_csv", "read_json"]


def _text(path: Path) -> str:
    try:
        return Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileInvalid(f"{path}: no such file; check the path") from None
    except UnicodeDecodeError:
        raise InputFileInvalid(f"{path}: not a UTF-8 text file; export it again as CSV (UTF-8)") from None


def read_csv(
    path: Path, *, required: tuple[str, ...], numeric: tuple[str, ...] = (), optional: dict[str, Any] | None = None
) -> list[dict[str, Any]]:
    """Rows of a CSV with a header; ``numeric`` columns become floats, ``optional`` ones get their defaults."""
    optional = optional or {}
    reader = csv.DictReader(io.StringIO(_text(path)))
    header = [h.strip() for h in reader.fieldnames or []]
    missing = [c for c in required if c not in header]
    if missing:
        raise InputFileInvalid(
            f"{path}: missing column{'s' if len(missing) > 1 else ''} {', '.join(missing)}; "
            f"the header must name {', '.join(required)} (found: {', '.join(header) or 'no header'})"
        )
    rows = []
    for line, raw in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in raw.items() if k is not None}
        if not any(row.values()):
            continue
        for col, default in optional.items():
            if row.get(col, "") == "":
                row[col] = default
        for col in numeric:
            if col not in row or isinstance(row[col], float) or row[col] is None:
                continue
            try:
                value = float(row[col])
            except ValueError:
                raise InputFileInvalid(
                    f"{path} line {line}: {col} {row[col]!r} is not a number; use a decimal point, e.g. 12.345"
                ) from None
            if not math.isfinite(value):
                raise InputFileInvalid(f"{path} line {line}: {col} {row[col]!r} is not a finite number")
            row[col] = value
        row["_line"] = line
        rows.append(row)
    if not rows:
        raise InputFileInvalid(f"{path}: no data rows under the header")
    return rows


def read_json(path: Path) -> Any:
    try:
        return json.loads(_text(path))
    except json.JSONDecodeError as exc:
        raise InputFileInvalid(f"{path} line {exc.lineno}: not valid JSON ({exc.msg})") from None
