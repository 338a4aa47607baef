"""Bag labels: a PDF sheet of labels, each with the find's number, site, trench, unit, category, date and
recorder in large type and a QR code holding the find's id and number. No Kivy here.

The sheet is A4 with 3 x 7 labels of 70 x 42.3 mm (a common office label-sheet layout; common practice, no
source); any printer that takes A4 prints it. The QR code (segno, error correction level M) carries
``baulk-find:<site code>:<number>:<find id>``, so a phone or the camp can read which find a bag holds even when the
printed text is worn. The file is written to a temporary name and moved into place: a half-written sheet never
appears under the final name.
"""

from __future__ import annotations

import datetime as dt
import os
import tempfile
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

__all__ = ["LabelData", "PREFIX", "fit_size", "label_payload", "parse_label_payload", "write_label_sheet"]

PREFIX = "baulk-find"
MM = 72 / 25.4  # PDF points per millimetre
PAGE_W, PAGE_H = 210 * MM, 297 * MM
COLS, ROWS = 3, 7
LABEL_W, LABEL_H = 70 * MM, 42.3 * MM
QR_SIDE = 30 * MM


@dataclass(frozen=True)
class LabelData:
    find_id: uuid.UUID
    number: int
    site: str
    trench: str
    unit: str
    category: str
    material: str
    found_on: dt.date
    recorder: str
    human_remains: bool = False


def label_payload(site: str, number: int, find_id: uuid.UUID) -> str:
    return f"{PREFIX}:{site}:{number}:{find_id}"


def parse_label_payload(text: str) -> tuple[str, int, uuid.UUID]:
    """(site code, number, find id) from a scanned label; ``ValueError`` for anything else."""
    prefix, site, number, find_id = text.split(":", 3)
    if prefix != PREFIX:
        raise ValueError(f"{text[:40]!r} is not a Baulk bag label")
    return site, int(number), uuid.UUID(find_id)


def _draw_qr(canvas: object, payload: str, x: float, y: float, side: float) -> None:
    import segno

    qr = segno.make(payload, error="m", micro=False)
    matrix = [list(row) for row in qr.matrix]
    n = len(matrix)
    quiet = 4  # the quiet zone the QR standard asks for, in modules
    cell = side / (n + 2 * quiet)
    canvas.setFillColorRGB(0, 0, 0)  # type: ignore[attr-defined]
    for r, row in enumerate(matrix):
        for c, dark in enumerate(row):
            if dark:
                canvas.rect(x + (c + quiet) * cell, y + side - (r + quiet + 1) * cell, cell, cell,  # type: ignore[attr-defined]
                            stroke=0, fill=1)


MIN_TEXT_PT = 6.5  # smaller than this is hard to read on a bag in the field (common practice, no source)


def _width(text: str, size: float, font: str = "Helvetica-Bold") -> float:
    from reportlab.pdfbase.pdfmetrics import stringWidth

    return float(stringWidth(text, font, size))


def fit_size(text: str, font: str, width: float, *, largest: float) -> float:
    """The largest type size (down to ``MIN_TEXT_PT``) at which ``text`` fits ``width`` points."""
    size = largest
    while size > MIN_TEXT_PT and _width(text, size, font) > width:
        size = round(size - 0.5, 1)
    return size


def _cut(text: str, width: float) -> str:
    """Text too long even at the smallest size: cut, with '...' to show it was."""
    while text and _width(text + "...", MIN_TEXT_PT) > width:
        text = text[:-1]
    return text + "..."


def _draw_label(canvas: object, label: LabelData, x: float, y: float) -> None:
    c = canvas
    pad = 3 * MM
    _draw_qr(c, label_payload(label.site, label.number, label.find_id), x + pad / 2, y + (LABEL_H - QR_SIDE) / 2, QR_SIDE)
    tx = x + QR_SIDE + pad
    top = y + LABEL_H - pad
    c.setFillColorRGB(0, 0, 0)  # type: ignore[attr-defined]
    c.setFont("Helvetica-Bold", 20)  # type: ignore[attr-defined]
    c.drawString(tx, top - 18, f"{label.number}")  # type: ignore[attr-defined]
    lines = [f"{label.site}  {label.trench}  unit {label.unit}", f"{label.category}: {label.material.replace('_', ' ')}",
             f"{label.found_on.isoformat()}  {label.recorder}"]
    if label.human_remains:
        lines.append("HANDLE PER LOCAL LAW")
    width = x + LABEL_W - pad / 2 - tx
    for i, line in enumerate(lines):
        size = fit_size(line, "Helvetica-Bold", width, largest=10.0)
        c.setFont("Helvetica-Bold", size)  # type: ignore[attr-defined]
        c.drawString(tx, top - 34 - i * 13, line if size > MIN_TEXT_PT or _width(line, size) <= width  # type: ignore[attr-defined]
                     else _cut(line, width))
    c.setLineWidth(0.3)  # type: ignore[attr-defined]
    c.setStrokeColorRGB(0.6, 0.6, 0.6)  # type: ignore[attr-defined]
    c.rect(x, y, LABEL_W, LABEL_H, stroke=1, fill=0)  # type: ignore[attr-defined]


def write_label_sheet(path: Path, labels: list[LabelData],
                      progress: Callable[[int, int], None] | None = None) -> Path:
    """Write the labels (21 to a page, in the order given) to ``path`` as PDF; returns the path. ``progress``
    is called with (pages done, pages) after each page is drawn (the Labels screen's bar)."""
    from reportlab.pdfgen.canvas import Canvas

    if not labels:
        raise ValueError("no labels to print")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".labels-", suffix=".pdf", dir=path.parent)
    os.close(fd)
    try:
        canvas = Canvas(tmp, pagesize=(PAGE_W, PAGE_H), invariant=True)
        canvas.setTitle("Baulk bag labels")
        margin_x = (PAGE_W - COLS * LABEL_W) / 2
        margin_y = (PAGE_H - ROWS * LABEL_H) / 2
        pages = -(-len(labels) // (COLS * ROWS))
        for i, label in enumerate(labels):
            slot = i % (COLS * ROWS)
            if i and slot == 0:
                canvas.showPage()
                if progress is not None:
                    progress(i // (COLS * ROWS), pages)
            col, row = slot % COLS, slot // COLS
            _draw_label(canvas, label, margin_x + col * LABEL_W, PAGE_H - margin_y - (row + 1) * LABEL_H)
        canvas.save()
        if progress is not None:
            progress(pages, pages)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path
