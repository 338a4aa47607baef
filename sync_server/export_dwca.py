"""The Darwin Core Archive of an export: ``dwc_archive.zip`` holding ``meta.xml``, ``eml.xml`` and the occurrence
core ``occurrence.csv`` (the same rows as ``dwc_occurrence.csv``; what each term holds: ``schema.dwc``).

Zip entries carry a fixed date and a fixed order, so the same store gives the same bytes.
"""

from __future__ import annotations

import csv
import io
import zipfile
from pathlib import Path
from typing import Any

from schema.dwc import DWC_TERMS, eml_xml, meta_xml
from schema.records import Site

__all__ = ["CORE_FILE", "write_archive"]

CORE_FILE = "occurrence.csv"
_EPOCH = (1980, 1, 1, 0, 0, 0)  # the earliest date a zip entry can hold: no wall-clock time in the file


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(round(v, 9))
    return str(v)


def _core(rows: list[dict[str, Any]]) -> bytes:
    names = [t for t, *_ in DWC_TERMS]
    buf = io.StringIO(newline="")
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(names)
    for r in rows:
        w.writerow([_cell(r.get(k)) for k in names])
    return buf.getvalue().encode("utf-8")


def write_archive(path: Path, site: Site, rows: list[dict[str, Any]], *, seasons: list[str]) -> int:
    """Write the archive; returns the number of occurrences in it."""
    names = [t for t, *_ in DWC_TERMS]
    creators = sorted({r["recordedBy"] for r in rows if r.get("recordedBy")})
    eml = eml_xml(
        package_id=f"baulk-{site.code.lower()}-{'-'.join(seasons) or 'all'}-fossils",
        title=f"{site.name} ({site.code}): fossil finds, seasons {', '.join(seasons) or 'all'}",
        site_name=site.name, site_code=site.code, creators=creators, pub_date=None,
        abstract=(f"Fossil finds excavated at {site.name}, one occurrence per find (bag) with its stratigraphic "
                  "horizon, the chronostratigraphic stages of the horizon's age bracket and its position; finds with "
                  "no position of their own are georeferenced to their trench by the point-radius method."))
    entries = [("meta.xml", meta_xml(CORE_FILE, names).encode("utf-8")), ("eml.xml", eml.encode("utf-8")),
               (CORE_FILE, _core(rows))]
    with zipfile.ZipFile(path, "w") as z:
        for name, data in entries:
            info = zipfile.ZipInfo(name, date_time=_EPOCH)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            z.writestr(info, data)
    return len(rows)
