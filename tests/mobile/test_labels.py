"""Bag labels: the PDF is rendered back by PDFium (pypdfium2) and every QR code decoded by ZXing (zxing-cpp, the
C++ port of the ZXing barcode library), two reference readers that share no code with the writer (reportlab, segno).

OpenCV's QR detector was the reader before: it misses about one well-formed code in seventy (it failed on a
perfect pixel rendering of some random find ids at 6 and 8 px a module), which made these tests fail at random."""

from __future__ import annotations

import datetime as dt
import uuid

import numpy as np
import pytest

import mobile.labels as L
from mobile.labels import LabelData, label_payload, parse_label_payload, write_label_sheet


def _labels(n: int) -> list[LabelData]:
    return [LabelData(find_id=uuid.UUID(int=1000 + i), number=1400 + i, site="VLM", trench="TR1", unit="101",
                      category="artifact", material="obsidian", found_on=dt.date(2026, 7, 3), recorder="AK")
            for i in range(n)]


def _decode_page(pdf_path, page_index: int) -> tuple[list[str], str]:  # type: ignore[no-untyped-def]
    """Every QR payload on a page (ZXing) and the page's text (PDFium)."""
    import pypdfium2 as pdfium
    import zxingcpp

    pdf = pdfium.PdfDocument(str(pdf_path))
    page = pdf[page_index]
    text = page.get_textpage().get_text_range()
    scale = 200 / 72
    image = np.asarray(page.render(scale=scale).to_pil().convert("L"))
    pdf.close()
    # one label at a time, as a person scans one bag: cut each slot of the 3 x 7 sheet out of the page
    payloads = []
    mx, my = (L.PAGE_W - L.COLS * L.LABEL_W) / 2, (L.PAGE_H - L.ROWS * L.LABEL_H) / 2
    for row in range(L.ROWS):
        for col in range(L.COLS):
            x0, y0 = int((mx + col * L.LABEL_W) * scale), int((my + row * L.LABEL_H) * scale)
            cell = image[y0:y0 + int(L.LABEL_H * scale), x0:x0 + int(L.LABEL_W * scale)]
            found = zxingcpp.read_barcodes(np.ascontiguousarray(cell), formats=zxingcpp.BarcodeFormat.QRCode)
            assert len(found) <= 1, f"label slot row {row} col {col} holds {len(found)} codes"
            payloads.extend(code.text for code in found if code.valid)
    return payloads, text


def test_payload_round_trip() -> None:
    fid = uuid.uuid4()
    assert parse_label_payload(label_payload("VLM", 1432, fid)) == ("VLM", 1432, fid)
    with pytest.raises(ValueError, match="is not a Baulk bag label"):
        parse_label_payload("http://example.org:1:2")


def test_sheet_reads_back_with_pdfium_and_zxing(tmp_path) -> None:  # type: ignore[no-untyped-def]
    labels = _labels(23)  # a full page of 21 and two on a second page
    path = write_label_sheet(tmp_path / "labels.pdf", labels)
    import pypdfium2 as pdfium

    assert len(pdfium.PdfDocument(str(path))) == 2
    codes, text = _decode_page(path, 0)
    expected = {label_payload("VLM", l.number, l.find_id) for l in labels[:21]}
    assert set(codes) == expected
    words = " ".join(text.split())  # PDFium gives the text back with runs of spaces collapsed
    assert words.startswith("1400 VLM TR1 unit 101 artifact: obsidian 2026-07-03 AK 1401 VLM TR1")
    codes2, _ = _decode_page(path, 1)
    assert set(codes2) == {label_payload("VLM", l.number, l.find_id) for l in labels[21:]}
    assert [p.name for p in tmp_path.iterdir()] == ["labels.pdf"]  # no temporary file left behind


def test_a_failed_write_leaves_nothing(tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    import mobile.labels as labels_module

    def broken(*_a, **_k):  # type: ignore[no-untyped-def]
        raise RuntimeError("disk full")

    monkeypatch.setattr(labels_module, "_draw_label", broken)
    with pytest.raises(RuntimeError):
        write_label_sheet(tmp_path / "labels.pdf", _labels(2))
    assert list(tmp_path.iterdir()) == []


def test_print_queue_marks_printed_finds(tablet, demo_site, tmp_path) -> None:  # type: ignore[no-untyped-def]
    from mobile.controllers import FindController, LabelQueue, Position
    from mobile.instruments import ShotSimulator
    from tests.helpers import start_field_day

    days, truth = start_field_day(tablet, demo_site)
    finds = FindController(tablet, days)
    sim = ShotSimulator(truth)
    made = [finds.record(category="artifact", values={"material": "chert"},
                         position=Position("shot", shot_line=sim.shot_line(1001 + i * 0.3, 2001, 99.8))).find for i in range(3)]
    finds.void(made[1].id, "entered twice")
    queue = LabelQueue(tablet)
    assert [f.number for f in queue.queue()] == [1, 3]
    path = queue.print_queue(tmp_path)
    codes, _ = _decode_page(path, 0)
    assert sorted(codes) == sorted(label_payload("VLM", f.number, f.id) for f in (made[0], made[2]))
    assert queue.queue() == []


def test_every_line_stays_inside_its_label(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Issue 18 item 8: "HANDLE PER LOCAL LAW" and a long material ran over the label's edge; each character's
    box, as PDFium places it, now lies inside the first label's cell."""
    import pypdfium2 as pdfium

    label = LabelData(find_id=uuid.UUID(int=7), number=1432, site="VLM", trench="TR12", unit="1012",
                      category="fossil", material="other_organic_material", found_on=dt.date(2026, 7, 3),
                      recorder="ABCD", human_remains=True)
    path = write_label_sheet(tmp_path / "labels.pdf", [label])
    pdf = pdfium.PdfDocument(str(path))
    textpage = pdf[0].get_textpage()
    text = textpage.get_text_range()
    assert "HANDLE PER LOCAL LAW" in text and "fossil: other organic material" in text
    mx, my = (L.PAGE_W - L.COLS * L.LABEL_W) / 2, (L.PAGE_H - L.ROWS * L.LABEL_H) / 2
    left, top = mx, L.PAGE_H - my  # the first slot, top left (PDF y runs upwards)
    for i in range(textpage.count_chars()):
        x0, y0, x1, y1 = textpage.get_charbox(i)
        if x1 > x0:  # spaces have no box
            assert left <= x0 and x1 <= left + L.LABEL_W and top - L.LABEL_H <= y0 and y1 <= top, (text[i], x1)
    pdf.close()
