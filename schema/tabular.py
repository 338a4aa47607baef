"""Reading the small CSV and JSON files data managers hand to the command line, with errors that name the
file, the line, the column and the fix; and the columns of the record tables the analyst's export writes
(``record_columns``, ``record_row``: derived from the record models through ``schema.tables``)."""

from __future__ import annotations

import csv
import io
import json
import math
import re
from pathlib import Path
from typing import Any

from .errors import InputFileInvalid

__all__ = ["json_key_lines", "read_csv", "read_json", "read_text", "record_columns", "record_row"]

# What each kind of input file is, and how to get a good one again, for a file that is not UTF-8 text.
_NOT_TEXT = {
    "CSV": "not a UTF-8 text file; export it again as CSV (UTF-8)",
    "JSON": "not a JSON text file (it is binary, not UTF-8 text); save it again as JSON text (UTF-8)",
    "NMEA": "not a text file of NMEA sentences (it is binary); copy the receiver's log again as plain text",
}


def read_text(path: Path, *, kind: str = "CSV") -> str:
    """The text of a small input file of ``kind`` (CSV, JSON or NMEA); a binary file is refused as not text."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileInvalid(f"{path}: no such file; check the path") from None
    except UnicodeDecodeError:
        raise InputFileInvalid(f"{path}: {_NOT_TEXT[kind]}") from None
    if "\x00" in text:  # valid UTF-8, but no text file holds NUL characters
        raise InputFileInvalid(f"{path}: {_NOT_TEXT[kind]}")
    return text


def read_csv(
    path: Path, *, required: tuple[str, ...], numeric: tuple[str, ...] = (), optional: dict[str, Any] | None = None,
    unique: tuple[str, ...] = (),
) -> list[dict[str, Any]]:
    """Rows of a CSV with a header; ``numeric`` columns become finite floats, ``optional`` ones get their defaults
    (a default of ``None`` stays ``None``), and a value repeated in a ``unique`` column is refused with both lines."""
    optional = optional or {}
    seen: dict[str, dict[str, int]] = {col: {} for col in unique}
    reader = csv.DictReader(io.StringIO(read_text(path)))
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
        for col in unique:
            first = seen[col].setdefault(row.get(col, ""), line)
            if first != line:
                raise InputFileInvalid(f"{path} line {line}: {col} {row.get(col, '')!r} is already used on line {first}; "
                                       f"each row needs its own {col}: rename or remove one of them")
        row["_line"] = line
        rows.append(row)
    if not rows:
        raise InputFileInvalid(f"{path}: no data rows under the header")
    return rows


def read_json(path: Path) -> Any:
    """The value of a small JSON file (``NaN`` and ``Infinity`` are read as Python reads them: check numbers)."""
    return _loads(path, read_text(path, kind="JSON"))


def _loads(path: Path, text: str) -> Any:
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputFileInvalid(f"{path} line {exc.lineno}: not valid JSON ({exc.msg})") from None
    except RecursionError:
        raise InputFileInvalid(f"{path}: not a JSON file Baulk can read (nested too deeply); save it again as one "
                               "flat JSON object") from None


def json_key_lines(path: Path) -> tuple[Any, dict[str, int]]:
    """A JSON file's value and, when it is an object, the line of each of its keys (for messages)."""
    text = read_text(path, kind="JSON")
    value = _loads(path, text)
    lines: dict[str, int] = {}
    if isinstance(value, dict):
        for key in value:
            found = re.search(r'"%s"\s*:' % re.escape(json.dumps(key)[1:-1]), text)
            if found:
                lines[key] = text.count("\n", 0, found.start()) + 1
    return value, lines


# --- Record tables for the analyst's export -------------------------------------------------------------------
# Export columns are derived from the SQL tables (``schema.tables``), which derive from the record models: a field
# added to a record reaches its export table, its data-package type, its vocabulary and its description at once.

_FRICTIONLESS = {"Uuid": "string", "Enum": "string", "Boolean": "boolean", "BigInteger": "integer",
                 "Integer": "integer", "Double": "number", "Float": "number", "String": "string",
                 "UTCDateTime": "datetime", "DateTime": "datetime", "Date": "date", "JSON": "string"}

Column = tuple[str, str, str, dict[str, Any]]  # name, Frictionless type, description, constraints


def record_columns(record: str, *, drop: tuple[str, ...] = ("site_id",)) -> list[Column]:
    """The export columns of one record type (``schema.records.REGISTRY`` name): every field but ``drop``, typed
    for a Frictionless Table Schema (ids and codes as strings, vocabularies as ``enum`` constraints, JSON-valued
    fields as JSON text), ``required`` where the record requires the field, the field's description."""
    from .tables import metadata

    out: list[Column] = []
    for col in metadata.tables[record].columns:
        if col.name in drop:
            continue
        kind = type(col.type).__name__
        ftype = _FRICTIONLESS.get(kind, "string")
        # an empty text reads as missing in the export (missingValues [""]): text fields are never "required"
        must = col.primary_key or (not col.nullable and kind not in ("String", "JSON"))
        cons: dict[str, Any] = {"required": True} if must else {}
        if col.primary_key:
            cons["unique"] = True
        if kind == "Enum":
            cons["enum"] = list(col.type.enums)  # type: ignore[attr-defined]
        what = col.comment or col.name.replace("_", " ")
        if kind == "JSON":
            what += " (JSON text)"
        if kind == "Uuid":
            what += " (UUID)" if col.primary_key else " (UUID of the record it names)"
        out.append((col.name, ftype, what, cons))
    return out


def record_row(record: Any, columns: list[Column]) -> dict[str, Any]:
    """One record (a pydantic model) as the row of its export table: JSON-valued fields as compact JSON text,
    ids as text."""
    import uuid as _uuid

    raw = record.model_dump()
    row: dict[str, Any] = {}
    for name, ftype, _what, _c in columns:
        v = raw.get(name)
        if isinstance(v, (list, dict, tuple)):
            v = json.dumps(v, sort_keys=True, separators=(",", ":"), default=str)
        elif isinstance(v, _uuid.UUID):
            v = str(v)
        row[name] = v
    return row
